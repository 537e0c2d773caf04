# Every target sets itself up: a fresh machine needs only python3 and make.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean cfd-example

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/doe run studies/demo_hatch.toml

# one pytest worker per core (pytest-xdist; a file's tests stay on one worker, so its shared fixtures are
# built once), and one BLAS thread each: the tests work on small matrices, where more threads only contend
test: $(STAMP)
	OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 $(PY) -m pytest -n auto --dist loadfile; rc=$$?; if [ $$rc -eq 5 ]; then echo "no tests collected"; exit 0; fi; exit $$rc

bench: $(STAMP)
	$(PY) -m pytest -m slow
	$(PY) benchmarks/run_all.py $(BENCH_ARGS)

clean:
	rm -rf $(VENV) reports/demo-* build *.egg-info

# Real CFD in the loop (needs root or sudo for apt): OpenFOAM from Debian, gmsh from PyPI, then four coarse
# 2-D RANS runs of the invented hatchback planned, run, stored (resumable), fitted and reported.
cfd-example: $(STAMP)
	@command -v simpleFoam >/dev/null 2>&1 || { SUDO=$$([ "$$(id -u)" -eq 0 ] || echo sudo); \
	  $$SUDO apt-get update -qq && DEBIAN_FRONTEND=noninteractive $$SUDO apt-get install -y -qq openfoam; }
	$(PY) -m pip install --quiet -e '.[cfd]'
	PATH="$(CURDIR)/$(VENV)/bin:$$PATH" $(VENV)/bin/doe run studies/rans_example.toml

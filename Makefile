# Every target sets itself up: a fresh machine needs only python3 and make.
PYTHON ?= python3
VENV   := .venv
PY     := $(VENV)/bin/python
STAMP  := $(VENV)/.installed

.PHONY: demo test bench clean

$(STAMP): pyproject.toml
	$(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,cluster]'
	touch $(STAMP)

demo: $(STAMP)
	$(VENV)/bin/doe run studies/demo_hatch.toml

test: $(STAMP)
	$(PY) -m pytest; rc=$$?; if [ $$rc -eq 5 ]; then echo "no tests collected"; exit 0; fi; exit $$rc

bench: $(STAMP)
	$(PY) -m pytest -m slow
	$(PY) benchmarks/run_all.py $(BENCH_ARGS)

clean:
	rm -rf $(VENV) reports/demo-* build *.egg-info

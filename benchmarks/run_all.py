"""Run every benchmark and write reports/benchmarks.md.

Each ``benchmarks/bench_*.py`` module has ``run(quick: bool) -> list[str]`` returning
Markdown (a heading, a short statement of what is measured, tables). Numbers in
reports/benchmarks.md are only ever written by this script.

Usage::

    python benchmarks/run_all.py            # full run (about an hour on 2 cores: sum of the sections' times)
    python benchmarks/run_all.py --quick    # short run for checks (under 3 minutes)
    python benchmarks/run_all.py --only aero,plans   # refresh just those sections of the file
"""
from __future__ import annotations

import argparse
import importlib.util
import os
import platform
import sys
import time
import traceback
from datetime import datetime, timezone
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


def _machine() -> str:
    try:
        import numpy
        import scipy
        import sklearn

        libs = f"numpy {numpy.__version__}, scipy {scipy.__version__}, scikit-learn {sklearn.__version__}"
    except ImportError:  # pragma: no cover
        libs = ""
    cpu = platform.processor() or platform.machine()
    return f"{platform.system()} {platform.release()}, {cpu}, {os.cpu_count()} cores, Python {platform.python_version()}; {libs}"


def _load(path: Path):
    spec = importlib.util.spec_from_file_location(path.stem, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module          # dataclasses look their module up here
    sys.path.insert(0, str(HERE))
    spec.loader.exec_module(module)
    return module


def _marked(name: str, section: list) -> list:
    """A section between markers, so that ``--only`` can later replace just that section."""
    return [f"<!-- bench:{name} -->", *section, f"<!-- /bench:{name} -->", ""]


def _replace_section(text: str, name: str, section: list) -> str:
    """``text`` with the marked section ``name`` replaced (or added before the total line)."""
    block = "\n".join(_marked(name, section))
    start, end = f"<!-- bench:{name} -->", f"<!-- /bench:{name} -->"
    if start in text and end in text:
        i, j = text.index(start), text.index(end) + len(end) + 1
        return text[:i] + block + text[j:]
    k = text.rfind("Total wall time:")
    k = len(text) if k < 0 else k
    return text[:k] + block + "\n" + text[k:]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="short run for checks")
    parser.add_argument("--only", help="comma-separated benchmark names (file names without bench_)")
    parser.add_argument("--out", type=Path, default=ROOT / "reports" / "benchmarks.md")
    args = parser.parse_args(argv)
    names = set(args.only.split(",")) if args.only else None
    files = sorted(HERE.glob("bench_*.py"))
    started = time.perf_counter()
    lines = ["# Benchmarks", "",
             f"Written by `python benchmarks/run_all.py{' --quick' if args.quick else ''}` (`make bench`) on "
             f"{datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC.", "",
             f"Machine: {_machine()}.", "",
             "Absolute times on a shared machine are noisy; ratios measured in the same run are not. "
             "Seeds are given in each section.", ""]
    sections = {}
    for path in files:
        name = path.stem.removeprefix("bench_")
        if names and name not in names:
            continue
        print(f"[bench] {name} ...", file=sys.stderr, flush=True)
        t0 = time.perf_counter()
        try:
            section = _load(path).run(args.quick)
        except Exception:  # a broken benchmark is reported, the others still run
            section = [f"## {name}", "", "This benchmark failed:", "", "```",
                       traceback.format_exc(limit=3).strip(), "```"]
        sections[name] = section + ["", f"_{name}: {time.perf_counter() - t0:.0f} s of wall time"
                                        f"{' (quick mode)' if args.quick else ''}, run on "
                                        f"{datetime.now(timezone.utc):%Y-%m-%d %H:%M} UTC._"]
    args.out.parent.mkdir(parents=True, exist_ok=True)
    if names and args.out.exists():  # refresh only the named sections of the existing file
        text = args.out.read_text()
        for name, section in sections.items():
            text = _replace_section(text, name, section)
        args.out.write_text(text)
    else:
        for name, section in sections.items():
            lines += _marked(name, section)
        lines.append(f"Total wall time: {time.perf_counter() - started:.0f} s.")
        args.out.write_text("\n".join(lines) + "\n")
    print(f"wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())

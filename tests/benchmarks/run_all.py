"""Run every benchmark script in this folder, one after the other, with its default settings.

Usage: ``make bench`` (or ``python tests/benchmarks/run_all.py [NAME ...]`` to run only some, by file stem).
Benchmarks measure speed and memory; they are not part of the test suite and assert nothing.
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
#: Helper scripts other benchmarks run as child processes (they need arguments).
HELPERS = {"dis_interpolate"}


def main(argv: list[str]) -> int:
    scripts = sorted(
        p
        for p in HERE.glob("*.py")
        if p.name != Path(__file__).name and not p.name.startswith("_") and p.stem not in HELPERS
    )
    if argv:
        wanted = set(argv)
        unknown = wanted - {p.stem for p in scripts}
        if unknown:
            print(f"run_all: unknown benchmark(s): {', '.join(sorted(unknown))}", file=sys.stderr)
            return 2
        scripts = [p for p in scripts if p.stem in wanted]
    failed = []
    for script in scripts:
        print(f"=== {script.stem}", flush=True)
        start = time.perf_counter()
        rc = subprocess.call([sys.executable, str(script)])
        print(f"=== {script.stem}: exit {rc}, {time.perf_counter() - start:.1f} s", flush=True)
        if rc:
            failed.append(script.stem)
    if failed:
        print(f"run_all: failed: {', '.join(failed)}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

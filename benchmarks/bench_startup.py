"""Start-up time of ttmap in a fresh process: ``ttmap --help`` and ``import ttmap``.

Prints the median wall time of N fresh processes for each case, the modules
each case loads, and the ratio to a bare ``python -c pass`` (the interpreter's
own start-up). Goal (issue 8): ``ttmap --help`` under 0.3 s on 2 cores.

    python benchmarks/bench_startup.py [--runs 15]
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import time

CASES = {
    "python -c pass": "pass",
    "import ttmap": "import ttmap",
    "import ttmap.cli.main": "import ttmap.cli.main",
    "ttmap --help": (
        "import sys; sys.argv = ['ttmap', '--help']\n"
        "from ttmap.cli.main import cli\n"
        "try:\n    cli(prog_name='ttmap')\nexcept SystemExit:\n    pass"
    ),
}
HEAVY = ("numpy", "scipy", "pyproj", "shapely", "rasterio", "pyogrio", "matplotlib", "dask")


def wall_s(code: str, runs: int) -> float:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], check=True, stdout=subprocess.DEVNULL)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def loaded(code: str) -> tuple[int, list[str]]:
    probe = (
        code
        + "\nimport sys\nprint(len([m for m in sys.modules if m.startswith('ttmap')]), "
        + f"','.join(m for m in {HEAVY!r} if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", probe], check=True, capture_output=True, text=True).stdout
    last = out.strip().splitlines()[-1].split(" ", 1)
    return int(last[0]), [m for m in (last[1] if len(last) > 1 else "").split(",") if m]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=15)
    args = parser.parse_args()
    base = wall_s(CASES["python -c pass"], args.runs)
    print(f"median of {args.runs} fresh processes ({sys.executable})")
    for name, code in CASES.items():
        t = wall_s(code, args.runs)
        n, heavy = loaded(code)
        print(f"{name:24s} {t * 1000:7.0f} ms  ({t / base:4.1f} x bare python)  "
              f"ttmap modules {n:3d}  heavy: {', '.join(heavy) or 'none'}")


if __name__ == "__main__":
    main()

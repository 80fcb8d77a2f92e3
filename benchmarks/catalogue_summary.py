"""Run the adversarial catalogue (tests/adversarial) and print cases, clean, by class.

Usage::

    python benchmarks/catalogue_summary.py [extra pytest arguments]

A case is *clean* when its test passes: a refusal with exit status 1 or 2,
one line naming the value and the fix, no traceback and the folder as it
was; or, for a valid-but-odd input, the correct result. Classes are those of
the catalogue's module docstring (crash, late, wrong, unclear, refuse, valid).
Prints figures only; asserts nothing.
"""

from __future__ import annotations

import sys
import time
from collections import defaultdict
from pathlib import Path
from typing import Any

import pytest

ROOT = Path(__file__).resolve().parents[1]


class _Collector:
    def __init__(self) -> None:
        self.by_class: dict[str, dict[str, bool]] = defaultdict(dict)

    def pytest_runtest_logreport(self, report: Any) -> None:
        if report.when != "call" and not (report.when == "setup" and report.failed):
            return
        props = dict(report.user_properties)
        klass = props.get("klass")
        if klass is None:
            return
        self.by_class[str(klass)][report.nodeid] = bool(report.passed)


def main(argv: list[str]) -> int:
    collector = _Collector()
    t0 = time.perf_counter()
    code = pytest.main([str(ROOT / "tests" / "adversarial"), "-q", "-p", "no:cacheprovider",
                        "--no-header", "-rN", *argv], plugins=[collector])
    wall = time.perf_counter() - t0
    order = ["crash", "late", "wrong", "unclear", "refuse", "valid"]
    classes = sorted(collector.by_class, key=lambda k: order.index(k) if k in order else len(order))
    total = sum(len(v) for v in collector.by_class.values())
    clean = sum(ok for v in collector.by_class.values() for ok in v.values())
    print()
    print(f"{'class':<10}{'cases':>7}{'clean':>7}")
    for k in classes:
        rows = collector.by_class[k]
        print(f"{k:<10}{len(rows):>7}{sum(rows.values()):>7}")
    print(f"{'all':<10}{total:>7}{clean:>7}   ({wall:.1f} s)")
    for k in classes:
        for nodeid, ok in collector.by_class[k].items():
            if not ok:
                print(f"not clean: {nodeid.split('::')[-1]}")
    return int(code)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

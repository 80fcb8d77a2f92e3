"""Report generation time on the demo, beyond the products.

Runs ``ttmap demo`` once into a temporary folder (the products; the jobs
record their own ``report_s`` in ``run.json``), then times building the
report's context from the run folder, rendering the template and writing
``report.html`` (median of several repeats), and compares a demo run with
and without ``--no-report``. Prints figures and the ratio to the goal (under
1 s beyond the products); asserts nothing.

    python benchmarks/bench_report.py [--repeats N]
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args()

    from click.testing import CliRunner

    from ttmap.cli.main import cli
    from ttmap.io.report import write_report
    from ttmap.products.report import render_report, report_context_from_run

    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "demo"
        t0 = time.perf_counter()
        result = CliRunner().invoke(cli, ["demo", "--out", str(out)])
        t_demo = time.perf_counter() - t0
        if result.exit_code != 0:
            raise SystemExit(result.output)
        ctx_s, render_s, write_s, total_s = [], [], [], []
        size = 0
        for i in range(args.repeats):
            a = time.perf_counter()
            ctx = report_context_from_run(out)
            b = time.perf_counter()
            html = render_report(ctx)
            c = time.perf_counter()
            write_report(out / "report.html", html, overwrite=True)
            d = time.perf_counter()
            ctx_s.append(b - a)
            render_s.append(c - b)
            write_s.append(d - c)
            total_s.append(d - a)
            size = len(html.encode("utf-8"))
        import json

        rec = json.loads((out / "run.json").read_text(encoding="utf-8"))
        rec_site = json.loads((out / "site_maps" / "run.json").read_text(encoding="utf-8"))
        t1 = time.perf_counter()
        result = CliRunner().invoke(cli, ["demo", "--out", str(Path(tmp) / "plain"), "--no-report"])
        t_plain = time.perf_counter() - t1
        med = statistics.median
        print(f"demo run (products, in process): {t_demo:.2f} s; with --no-report: {t_plain:.2f} s")
        print(f"report_s recorded by the jobs: map {rec['timings_s']['report_s'] * 1000:.1f} ms, "
              f"site-map {rec_site['timings_s']['report_s'] * 1000:.1f} ms")
        print(f"report, median of {args.repeats}:")
        print(f"  context from run folder (read run.json, CSV, PNG -> base64): {med(ctx_s) * 1000:7.1f} ms")
        print(f"  render template (Jinja2, first call includes template compile): {med(render_s) * 1000:7.1f} ms"
              f" (first {render_s[0] * 1000:.1f} ms)")
        print(f"  write atomically: {med(write_s) * 1000:7.1f} ms")
        print(f"  total: {med(total_s) * 1000:7.1f} ms (first {total_s[0] * 1000:.1f} ms); "
              f"goal < 1000 ms: ratio {med(total_s) / 1.0:.3f}")
        print(f"  report.html size: {size / 1024:.0f} KB; report / demo run time: {med(total_s) / t_demo:.3f}")


if __name__ == "__main__":
    main()

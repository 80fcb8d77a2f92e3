"""Inputs of the adversarial catalogue: tiny invented rasters and files built in ``tmp_path``.

Every builder writes into the folder it is given and returns the path. The
grids are invented (no real place): a 50 x 60 lon/lat grid of 0.05 degrees
at 32-34.5 degrees south, 3000 m deep with a land strip in the east, and a
40 x 40 UTM grid of 1 km, 100 m deep with land in the east.
"""

from __future__ import annotations

import hashlib
import os
import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from affine import Affine
from click.testing import CliRunner, Result

GEO_TRANSFORM = Affine(0.05, 0.0, -72.0, 0.0, -0.05, -32.0)
GEO_SHAPE = (50, 60)
#: A water point of the lon/lat grid, and one on its land strip.
GEO_WATER = "-70.5,-33.2"
GEO_LAND = "-69.1,-33.2"
UTM_TRANSFORM = Affine(1000.0, 0.0, 300_000.0, 0.0, -1000.0, 6_200_000.0)


def geo_elevation() -> np.ndarray:
    elev = np.full(GEO_SHAPE, -3000.0, dtype=np.float32)
    elev[:, 55:] = 100.0
    return elev


def write_tif(path: Path, values: np.ndarray, *, crs: Any = "EPSG:4326", transform: Affine = GEO_TRANSFORM,
              nodata: float | None = None, **extra: Any) -> Path:
    import rasterio

    values = np.asarray(values)
    count = 1 if values.ndim == 2 else values.shape[0]
    with rasterio.open(path, "w", driver="GTiff", width=values.shape[-1], height=values.shape[-2], count=count,
                       dtype=values.dtype.name, crs=crs, transform=transform, nodata=nodata, **extra) as dst:
        if values.ndim == 2:
            dst.write(values, 1)
        else:
            dst.write(values)
    return path


def snapshot(root: Path) -> dict[str, str]:
    """Every file and folder under ``root``: relative path -> SHA-256 (``<dir>`` for folders)."""
    out: dict[str, str] = {}
    for dirpath, dirnames, filenames in os.walk(root):
        for d in dirnames:
            out[os.path.relpath(os.path.join(dirpath, d), root)] = "<dir>"
        for f in filenames:
            p = os.path.join(dirpath, f)
            with open(p, "rb") as fh:
                out[os.path.relpath(p, root)] = hashlib.sha256(fh.read()).hexdigest()
    return out


#: Words that name a fix in a refusal (give, pass, choose, ...), or click's
#: statement of the valid range or choices.
FIX_RE = re.compile(
    r"\b(give|pass|choose|use|check|declare|crop|rename|save|drop|move|remove|assign|write|set|add|open|"
    r"widen|reproject|make|warp|flip|needs|fix|must be|e\.g\.|is not in the range|choose from|one of|did you mean)",
    re.IGNORECASE,
)


#: The last line of a refused scenario file, and each problem line before it.
SCENARIO_SUMMARY_RE = re.compile(r"^\d+ problems? found in .*; nothing was run$")
SCENARIO_ISSUE_RE = re.compile(r"^\S.*?:(\d+:)? ")


def refusal_problems(result: Result, value: str) -> list[str]:
    """What is wrong with a refusal; empty when it is clean.

    Clean: exit status 1 or 2, no exception escaped, no traceback and no
    "unexpected" crash report, an ``Error:`` line, the offending ``value``
    in the error text, and a fix named.
    """
    problems = []
    if result.exit_code not in (1, 2):
        problems.append(f"exit status {result.exit_code}")
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        problems.append(f"exception {type(result.exception).__name__}: {result.exception}")
    text = result.output
    if "Traceback" in text:
        problems.append("traceback")
    if "unexpected" in text.lower():
        problems.append("crash reported as unexpected")
    lines = [line for line in text.splitlines() if line.strip()]
    start = next((i for i, line in enumerate(lines) if line.startswith("Error:")), None)
    if lines and SCENARIO_SUMMARY_RE.search(lines[-1]):
        # a scenario file: one line per problem (file:line: key: message), then the count
        issues = [line for line in lines if SCENARIO_ISSUE_RE.match(line)]
        if not issues:
            problems.append("no problem line before the count")
        block = "\n".join(issues)
    elif start is None:
        problems.append("no 'Error:' line")
        return problems
    else:
        block = "\n".join(lines[start:])
        if len(lines) - start > 1:
            problems.append(f"error text runs over {len(lines) - start} lines")
    if value.lower() not in block.lower():
        problems.append(f"offending value {value!r} not named")
    if not FIX_RE.search(block):
        problems.append("no fix named")
    return problems


@pytest.fixture
def run_cli() -> Callable[..., Result]:
    from ttmap.cli.main import cli

    runner = CliRunner()

    def run(args: list[str]) -> Result:
        return runner.invoke(cli, [str(a) for a in args], catch_exceptions=True)

    return run

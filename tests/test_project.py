"""Project-level rules (STYLE.md sections 1, 2 and 6, README): checked on the sources."""

from __future__ import annotations

import ast
import importlib
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "ttmap"
SKIP_DIRS = {
    ".git",
    ".venv",
    "venv",
    "__pycache__",
    "build",
    "dist",
    ".mypy_cache",
    ".pytest_cache",
    ".ruff_cache",
    "node_modules",
}
TEXT_SUFFIXES = {
    ".py",
    ".md",
    ".toml",
    ".txt",
    ".cfg",
    ".ini",
    ".csv",
    ".sh",
    ".yml",
    ".yaml",
    ".json",
    ".rst",
    ".sld",
    "",
}


def package_modules() -> list[Path]:
    return sorted(p for p in PACKAGE.rglob("*.py") if "__pycache__" not in p.parts)


def module_name(path: Path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def imported_modules(path: Path) -> set[str]:
    """Top-level names of every module imported anywhere in the file (also inside functions)."""
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    names: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module)
        elif (
            isinstance(node, ast.Call)
            and isinstance(node.func, (ast.Name, ast.Attribute))
            and getattr(node.func, "attr", getattr(node.func, "id", ""))
            in ("import_module", "__import__")
            and node.args
            and isinstance(node.args[0], ast.Constant)
            and isinstance(node.args[0].value, str)
        ):
            names.add(node.args[0].value)
    return names


def test_package_is_found():
    mods = package_modules()
    assert PACKAGE / "solver.py" in mods and PACKAGE / "cli" / "main.py" in mods
    assert len(mods) >= 20


# ---------------------------------------------------------------------------
# README and CI
# ---------------------------------------------------------------------------


def test_readme_holds_the_ci_test_command_verbatim():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    commands = [ln for ln in ci.splitlines() if ln.startswith("python3 -m venv")]
    assert len(commands) == 1, "expected one 'python3 -m venv' line in .ci/run"
    readme_lines = (ROOT / "README.md").read_text(encoding="utf-8").splitlines()
    assert commands[0] in readme_lines
    assert "pytest" in commands[0]


def test_readme_opening_and_cautions():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    body = re.sub(r"\A# [^\n]*\n+", "", readme)  # drop the title line
    first_paragraph = body.split("\n\n", 1)[0]
    assert "planners" in first_paragraph.lower()
    heading = re.search(r"^#+ Cautions\b.*$", readme, re.MULTILINE)
    assert heading, "README needs a Cautions section"
    section = readme[heading.end() :].split("\n## ", 1)[0]
    assert "not a warning" in section
    assert "wave heights" in section.lower()


# ---------------------------------------------------------------------------
# Module rules
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("path", package_modules(), ids=lambda p: str(p.relative_to(ROOT)))
def test_every_module_declares_all(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    declared = [
        node
        for node in tree.body
        if (
            isinstance(node, ast.Assign)
            and any(getattr(t, "id", None) == "__all__" for t in node.targets)
        )
        or (isinstance(node, ast.AnnAssign) and getattr(node.target, "id", None) == "__all__")
    ]
    assert declared, f"{path.relative_to(ROOT)} has no __all__ (STYLE.md section 2)"
    module = importlib.import_module(module_name(path))
    missing = [name for name in module.__all__ if not hasattr(module, name)]
    assert not missing, f"{module.__name__}.__all__ names undefined {missing}"
    assert len(set(module.__all__)) == len(module.__all__), "__all__ repeats a name"


def test_scikit_fmm_is_imported_only_in_solver():
    users = sorted(
        str(p.relative_to(ROOT))
        for p in package_modules()
        if any(m == "skfmm" or m.startswith("skfmm.") for m in imported_modules(p))
    )
    assert users == ["ttmap/solver.py"]


CORE = [
    "ttmap/physics",
    "ttmap/grid.py",
    "ttmap/solver.py",
    "ttmap/sources.py",
    "ttmap/traveltime.py",
    "ttmap/connectivity.py",
]
FORBIDDEN_IN_CORE = (
    "rasterio",
    "matplotlib",
    "click",
    "pyogrio",
    "ttmap.io",
    "ttmap.products",
    "ttmap.cli",
)


def core_files() -> list[Path]:
    files: list[Path] = []
    for entry in CORE:
        p = ROOT / entry
        files += sorted(p.rglob("*.py")) if p.is_dir() else [p]
    return files


@pytest.mark.parametrize("path", core_files(), ids=lambda p: str(p.relative_to(ROOT)))
def test_core_imports_no_io_plotting_or_cli(path):
    """The numerical core stays free of file, plotting and CLI libraries (STYLE.md section 1)."""
    bad = sorted(
        m
        for m in imported_modules(path)
        if any(m == f or m.startswith(f + ".") for f in FORBIDDEN_IN_CORE)
    )
    assert not bad, f"{path.relative_to(ROOT)} imports {bad}"


def test_core_loads_without_io_libraries():
    """Importing and running the engine pulls in none of them, even indirectly."""
    code = textwrap.dedent(
        f"""
        import sys
        import numpy as np
        from affine import Affine
        import ttmap

        g = ttmap.Grid((20, 20), Affine(1000, 0, 0, 0, -1000, 20000), "EPSG:32601")
        src = ttmap.Source.point_xy(10500, 10500)
        ttmap.compute_travel_time(np.full((20, 20), 100.0), g, src)
        forbidden = {FORBIDDEN_IN_CORE!r}
        print(sorted(m for m in sys.modules if any(m == f or m.startswith(f + ".") for f in forbidden)))
        """
    )
    proc = subprocess.run(
        [sys.executable, "-c", code],
        capture_output=True,
        text=True,
        check=False,
        timeout=60,
        cwd=ROOT,
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "[]"


# ---------------------------------------------------------------------------
# Sources cite only what they use
# ---------------------------------------------------------------------------

# assembled from parts so that this file does not match itself
_WORDS = ["lec" + "ture", "vid" + "eo", "trans" + "cript"]


def text_files() -> list[Path]:
    files = []
    for p in ROOT.rglob("*"):
        rel = p.relative_to(ROOT)
        if any(part in SKIP_DIRS or part.endswith(".egg-info") for part in rel.parts):
            continue
        if p.is_file() and p.suffix.lower() in TEXT_SUFFIXES:
            files.append(p)
    return files


def test_no_source_cites_forbidden_origins():
    pattern = re.compile("|".join(_WORDS), re.IGNORECASE)
    files = text_files()
    assert ROOT / "README.md" in files and PACKAGE / "solver.py" in files
    hits = []
    for p in files:
        try:
            text = p.read_text(encoding="utf-8")
        except UnicodeDecodeError:
            continue
        for n, line in enumerate(text.splitlines(), 1):
            if pattern.search(line):
                hits.append(f"{p.relative_to(ROOT)}:{n}: {line.strip()[:80]}")
    assert not hits, "\n".join(hits)

"""Project-level rules (DEVELOPERS.md "Layout" and "Conventions", README): checked on the sources.

The layer map (:data:`LAYERS`) is the one place that says which module sits
in which layer; DEVELOPERS.md describes the same picture in words.
"""

from __future__ import annotations

import ast
import importlib
import importlib.util
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
    assert declared, f"{path.relative_to(ROOT)} has no __all__ (DEVELOPERS.md, Conventions)"
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
    """The numerical core stays free of file, plotting and CLI libraries (DEVELOPERS.md, Layout)."""
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
# Layers import only downward; no private names across modules
# ---------------------------------------------------------------------------

#: Layer of every part of the package: a module may import modules of a lower
#: layer and of its own layer, never of a higher one. Keys are module names or
#: package prefixes (the longest matching key wins); every module must match
#: one, so a new module is placed here when it is added.
LAYERS: dict[str, int] = {
    # 0: physics, pure numpy
    "ttmap.physics": 0,
    # 1: the engine's parts
    "ttmap.grid": 1,
    "ttmap.connectivity": 1,
    "ttmap.sources": 1,
    "ttmap.solver": 1,
    # 2: the engine's entry points (one solve, site-centred and reciprocal solves, task specs)
    "ttmap.traveltime": 2,
    "ttmap.sitemap": 2,
    "ttmap.reciprocal": 2,
    "ttmap.nesting": 2,
    "ttmap.paths": 2,
    "ttmap.tasks": 2,
    # 3: files in and out, products, scenario files, the memory model, source location
    "ttmap.io": 3,
    "ttmap.products": 3,
    "ttmap.scenario": 3,
    "ttmap.memory": 3,
    "ttmap.locate": 3,
    # 4: jobs (map, site-map, scenario run, batch)
    "ttmap.jobs": 4,
    # 5: the command line
    "ttmap.cli": 5,
}

#: Modules any layer may import. They import only each other (the package
#: root ``ttmap`` is the public facade and may import anything).
ANYWHERE = ("ttmap.defaults", "ttmap.errors", "ttmap._typing", "ttmap.faults")


def layer_of(module: str) -> int | None:
    """The layer of a ttmap module name, by the longest matching key of LAYERS."""
    best: tuple[int, int] | None = None
    for key, layer in LAYERS.items():
        if module == key or module.startswith(key + "."):
            if best is None or len(key) > best[0]:
                best = (len(key), layer)
    return None if best is None else best[1]


def ttmap_imports(path: Path, own: str) -> list[tuple[int, str, str | None]]:
    """Every ttmap import in a file: (line, module, imported name or None).

    ``from a.b import c`` gives ``(line, "a.b", "c")``; ``import a.b`` gives
    ``(line, "a.b", None)``. Relative imports are resolved against the
    file's package. Imports inside functions and ``TYPE_CHECKING`` blocks
    count too. ``own`` is the file's module name.
    """
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    package = own if path.name == "__init__.py" else own.rpartition(".")[0]
    found: list[tuple[int, str, str | None]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [
                (node.lineno, a.name, None) for a in node.names if a.name.split(".")[0] == "ttmap"
            ]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.split(".")[0] == "ttmap":
                found += [(node.lineno, mod, a.name) for a in node.names]
    return found


def resolved_target(module: str, name: str | None) -> str:
    """The module an import needs (``from ttmap.products import maps``: ttmap.products.maps)."""
    if name is None or name == "*":
        return module
    candidate = f"{module}.{name}"
    try:
        spec = importlib.util.find_spec(module)
        if spec is not None and spec.submodule_search_locations is not None:
            if importlib.util.find_spec(candidate) is not None:
                return candidate
    except ModuleNotFoundError:
        pass
    return module


def package_files() -> list[tuple[Path, str]]:
    return [(p, module_name(p)) for p in package_modules()]


def layer_violations(files: list[tuple[Path, str]]) -> list[str]:
    """Upward imports in ``files`` ((path, module name) pairs), one line each."""
    problems: list[str] = []
    for path, importer in files:
        if importer == "ttmap":
            continue  # the public facade
        rel = path.relative_to(ROOT) if path.is_relative_to(ROOT) else path
        own_layer = layer_of(importer)
        if importer in ANYWHERE:
            for line, module, name in ttmap_imports(path, importer):
                target = resolved_target(module, name)
                if target not in ANYWHERE:
                    problems.append(
                        f"{rel}:{line}: {importer} (importable anywhere) imports {target}"
                    )
            continue
        if own_layer is None:
            problems.append(f"{rel}: {importer} is in no layer; add it to LAYERS")
            continue
        for line, module, name in ttmap_imports(path, importer):
            target = resolved_target(module, name)
            if target == "ttmap" or target in ANYWHERE or target.startswith("ttmap._typing"):
                continue
            target_layer = layer_of(target)
            if target_layer is None:
                problems.append(f"{rel}:{line}: imports {target}, which is in no layer")
            elif target_layer > own_layer:
                problems.append(
                    f"{rel}:{line}: {importer} (layer {own_layer}) imports {target} "
                    f"(layer {target_layer})"
                )
    return list(dict.fromkeys(problems))  # one line per import statement and target


def test_layer_map_places_every_module():
    unplaced = [
        module_name(p)
        for p in package_modules()
        if module_name(p) not in ("ttmap", *ANYWHERE) and layer_of(module_name(p)) is None
    ]
    assert not unplaced, f"add these modules to LAYERS: {unplaced}"
    assert layer_of("ttmap.products.maps") == 3 and layer_of("ttmap.physics.speed") == 0


def test_layers_import_only_downward():
    """physics < engine parts < traveltime, sitemap < io, products, scenario < jobs < cli."""
    problems = layer_violations(package_files())
    assert not problems, "upward imports:\n" + "\n".join(problems)


def is_private(name: str) -> bool:
    return name.startswith("_") and not (name.startswith("__") and name.endswith("__"))


def private_import_violations(files: list[tuple[Path, str]]) -> list[str]:
    """Private names and private modules used outside the module or package that owns them.

    Forbidden: ``from ttmap.x import _name`` in any other module;
    ``ttmap.x._mod`` (a private module) imported from outside package
    ``ttmap.x``; ``alias._name`` where ``alias`` is a ttmap module bound by
    an import in the same file.
    """
    problems: list[str] = []
    for path, importer in files:
        rel = path.relative_to(ROOT) if path.is_relative_to(ROOT) else path
        own_package = importer if path.name == "__init__.py" else importer.rpartition(".")[0]
        for line, module, name in ttmap_imports(path, importer):
            target = resolved_target(module, name)
            parts = target.split(".")
            for i, part in enumerate(parts):
                if is_private(part):
                    owner = ".".join(parts[:i])  # the package that holds the private module
                    if not (own_package == owner or own_package.startswith(owner + ".")):
                        problems.append(f"{rel}:{line}: imports private module {target}")
                    break
            if name is not None and is_private(name) and target == module and module != importer:
                problems.append(f"{rel}:{line}: imports private name {name} from {module}")
        # attribute access on imported ttmap modules: ``iso._helper``
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        aliases: dict[str, str] = {}
        for node in ast.walk(tree):
            if isinstance(node, ast.Import):
                for a in node.names:
                    if a.name.startswith("ttmap.") and a.asname:
                        aliases[a.asname] = a.name
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                for a in node.names:
                    target = resolved_target(node.module, a.name)
                    if target != node.module:  # a submodule bound to a name
                        aliases[a.asname or a.name] = target
        for node in ast.walk(tree):
            if (
                isinstance(node, ast.Attribute)
                and isinstance(node.value, ast.Name)
                and node.value.id in aliases
                and is_private(node.attr)
                and aliases[node.value.id] != importer
            ):
                problems.append(
                    f"{rel}:{node.lineno}: uses private {aliases[node.value.id]}.{node.attr}"
                )
    return list(dict.fromkeys(problems))


def test_no_module_imports_a_private_name_from_another():
    problems = private_import_violations(package_files())
    assert not problems, "private names used across modules:\n" + "\n".join(problems)


def test_the_import_rules_catch_what_they_should(tmp_path):
    """Both checks find what a module planted in the physics layer does wrong, and only that."""
    bad = tmp_path / "planted.py"
    bad.write_text(
        "from ttmap.products.maps import render_arrival_map\n"
        "from ttmap.sources import _nearest_open_water\n"
        "import ttmap.products._footer\n"
        "from ttmap.products import isochrones as iso\n"
        "iso._trace\n",
        encoding="utf-8",
    )
    good = tmp_path / "good.py"
    good.write_text(
        "from ttmap.physics.constants import G_M_S2\n"
        "from ttmap.errors import InputDataError\n"
        "from ttmap import _typing, __version__\n"
        "from ttmap.products._footer import caution_footer\n",  # inside its own package
        encoding="utf-8",
    )
    planted = [(bad, "ttmap.physics.planted")]
    layers = layer_violations(planted)
    privates = private_import_violations(planted)
    assert any("(layer 0) imports ttmap.products.maps (layer 3)" in p for p in layers)
    assert any("private name _nearest_open_water from ttmap.sources" in p for p in privates)
    assert any("private module ttmap.products._footer" in p for p in privates)
    assert any("uses private ttmap.products.isochrones._trace" in p for p in privates)
    assert layer_violations([(good, "ttmap.physics.good")]) == [
        f"{good}:4: ttmap.physics.good (layer 0) imports ttmap.products._footer (layer 3)"
    ]
    assert private_import_violations([(good, "ttmap.products.good")]) == []


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


def test_no_run_products_at_the_top_level():
    """The top level holds the project layout only: a run writing into the working folder
    (a test or script with a relative --out) must not leave products that get committed."""
    allowed = {"README.md", "DEVELOPERS.md", "pyproject.toml", ".gitignore"}
    proc = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        pytest.skip("not a git checkout")
    top = {f for f in proc.stdout.splitlines() if "/" not in f}
    assert top <= allowed, f"unexpected files at the top level: {sorted(top - allowed)}"

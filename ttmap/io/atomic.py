"""Write outputs all-or-nothing: temporary names first, rename on success.

Every product ttmap writes goes through one of the context managers here, so a
run that fails (bad input found late, full disk, Ctrl-C) never leaves a
half-written file under a product's name, and an existing file is never
replaced unless the caller asked for it.

- :func:`atomic_output` - one file. The block receives a hidden temporary name
  in the destination folder (``.arrival.tmp-1a2b3c4d.tif`` for
  ``arrival.tif``); on success it is renamed over the final name with
  :func:`os.replace`, which is atomic on one file system.
- :func:`atomic_output_multi` - one product made of several files that share a
  stem, such as an ESRI Shapefile (``.shp .shx .dbf .prj .cpg``).
- :func:`atomic_output_set` - several products committed together (for
  example one Shapefile per isochrone layer). The block writes into a hidden
  staging folder next to the destinations, under the final file names; on
  success every staged file is moved out, on failure the folder is deleted.
- :func:`check_writable` - refuse up front, before any expensive work, when an
  output exists and overwriting was not asked for.

Notes
-----
A single file is replaced atomically. A multi-file product is moved file by
file after every destination has been checked again, so the window in which a
reader could see a mix of old and new companions is a few renames long.
"""

from __future__ import annotations

import os
import secrets
import shutil
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path

from ttmap.errors import InputDataError, OutputExistsError

__all__ = [
    "atomic_output",
    "atomic_output_multi",
    "atomic_output_set",
    "check_writable",
    "SHAPEFILE_SUFFIXES",
]

#: Files that make up (or commonly accompany) an ESRI Shapefile. Used to
#: check for existing outputs and to remove stale companions on overwrite.
SHAPEFILE_SUFFIXES: tuple[str, ...] = (
    ".shp",
    ".shx",
    ".dbf",
    ".prj",
    ".cpg",
    ".qix",
    ".sbn",
    ".sbx",
    ".shp.xml",
)


def _refuse(path: Path) -> OutputExistsError:
    return OutputExistsError(f"{str(path)!r} exists; pass --overwrite to replace it")


def _check_folder(path: Path) -> None:
    folder = path.parent
    if not folder.is_dir():
        raise InputDataError(
            f"output folder {str(folder)!r} of {path.name!r} does not exist; create it first"
        )
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputDataError(
            f"output folder {str(folder)!r} is not writable; choose another output path"
        )


def check_writable(paths: Iterable[str | os.PathLike[str]], overwrite: bool) -> None:
    """Refuse, before any work is done, outputs that cannot be written.

    Parameters
    ----------
    paths : iterable of path-like
        Every file the run will write.
    overwrite : bool
        If False, an existing path is an error.

    Raises
    ------
    OutputExistsError
        A path exists and ``overwrite`` is False.
    InputDataError
        Two outputs share one path, a path is an existing folder, or its
        folder is missing or not writable.

    Examples
    --------
    >>> check_writable([], overwrite=False)
    """
    seen: dict[Path, str] = {}
    for p in paths:
        path = Path(p)
        key = path.resolve()
        if key in seen:
            raise InputDataError(
                f"two outputs would both be written to {str(path)!r}; give them different names"
            )
        seen[key] = str(path)
        if path.is_dir():
            raise InputDataError(f"output {str(path)!r} is a folder; give a file name")
        if path.exists() and not overwrite:
            raise _refuse(path)
        _check_folder(path)


def _temp_name(path: Path) -> Path:
    suffix = "".join(path.suffixes[-1:])
    stem = path.name[: len(path.name) - len(suffix)] if suffix else path.name
    return path.with_name(f".{stem}.tmp-{secrets.token_hex(4)}{suffix}")


def _remove_quietly(path: Path) -> None:
    try:
        if path.is_dir() and not path.is_symlink():
            shutil.rmtree(path, ignore_errors=True)
        else:
            path.unlink(missing_ok=True)
    except OSError:
        pass


def _sidecars(tmp: Path) -> list[Path]:
    """Files a library wrote next to ``tmp`` (``tmp.aux.xml``, ``tmp.ovr``, ``tmp-wal``...)."""
    return [
        p
        for p in tmp.parent.iterdir()
        if p.name != tmp.name and p.name.startswith(tmp.name) and p.name[len(tmp.name)] in ".-"
    ]


@contextmanager
def atomic_output(path: str | os.PathLike[str], *, overwrite: bool) -> Iterator[Path]:
    """Write one file under a temporary name and rename it when done.

    Parameters
    ----------
    path : path-like
        Final file name.
    overwrite : bool
        Replace an existing ``path``. If False and ``path`` exists, nothing is
        written and :class:`OutputExistsError` is raised on entry.

    Yields
    ------
    pathlib.Path
        Hidden temporary file in the same folder with the same suffix, e.g.
        ``.arrival.tmp-1a2b3c4d.tif``. The block creates and writes it.

    Raises
    ------
    OutputExistsError
        ``path`` exists (checked on entry, and again just before the rename)
        and ``overwrite`` is False.
    InputDataError
        The destination folder is missing or not writable.

    Notes
    -----
    If the block raises, the temporary file and any sidecar a library wrote
    beside it (``<temp>.aux.xml`` ...) are deleted and the exception
    propagates; the final name is untouched. On success such sidecars
    (names that extend the temporary name with ``.`` or ``-``) are renamed
    along with the file (``arrival.tif.aux.xml``). If the block
    returns without creating the temporary file, nothing is renamed.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> out = pathlib.Path(tempfile.mkdtemp()) / "note.txt"
    >>> with atomic_output(out, overwrite=False) as tmp:
    ...     _ = tmp.write_text("hello")
    >>> out.read_text()
    'hello'
    """
    final = Path(path)
    if final.is_dir():
        raise InputDataError(f"output {str(final)!r} is a folder; give a file name")
    if final.exists() and not overwrite:
        raise _refuse(final)
    _check_folder(final)
    tmp = _temp_name(final)
    try:
        yield tmp
        if not tmp.exists():
            return
        if final.exists() and not overwrite:
            raise _refuse(final)
        sidecars = _sidecars(tmp)
        os.replace(tmp, final)
        for side in sidecars:
            os.replace(side, final.with_name(final.name + side.name[len(tmp.name) :]))
    except BaseException as err:
        if isinstance(err, OSError) and err.errno is not None and not err.filename:
            err.filename = str(final)  # so a message can name the product, not a temporary name
        _remove_quietly(tmp)
        for side in _sidecars(tmp) if tmp.parent.is_dir() else []:
            _remove_quietly(side)
        raise


def _companions(path: Path, suffixes: Sequence[str]) -> list[Path]:
    """``path`` with its suffix swapped for each of ``suffixes``."""
    stem = path.name[: len(path.name) - len(path.suffix)] if path.suffix else path.name
    return [path.with_name(stem + s) for s in suffixes]


@contextmanager
def atomic_output_set(
    paths: Sequence[str | os.PathLike[str]],
    *,
    overwrite: bool,
    companion_suffixes: Sequence[str] = (),
) -> Iterator[list[Path]]:
    """Write several files (each maybe with companions) and commit them together.

    Parameters
    ----------
    paths : sequence of path-like
        Final names of the main files, e.g. ``["iso_lines.shp", "iso_bands.shp"]``.
    overwrite : bool
        Replace existing outputs. If False, an existing main file or companion
        is an error raised on entry, before anything is written.
    companion_suffixes : sequence of str
        Suffixes of files that belong with each main file, e.g.
        :data:`SHAPEFILE_SUFFIXES`. They are checked for existence on entry,
        and on overwrite old companions the new write did not produce are
        removed so a stale ``.cpg`` or index never outlives its ``.shp``.

    Yields
    ------
    list of pathlib.Path
        One path per entry of ``paths``: the same file name inside a hidden
        staging folder (``.ttmap-stage-1a2b3c4d``) next to the destination.
        Drivers may create any companions beside them.

    Raises
    ------
    OutputExistsError
        An output exists and ``overwrite`` is False.
    InputDataError
        Two outputs share a name, or a folder is missing or not writable.

    Notes
    -----
    On success every file in each staging folder is moved to the
    destination folder under the same name; on any exception the staging
    folders are deleted and nothing under a final name changes.
    """
    finals = [Path(p) for p in paths]
    to_check: list[Path] = []
    for f in finals:
        to_check.append(f)
        to_check.extend(c for c in _companions(f, companion_suffixes) if c != f)
    check_writable(finals, overwrite)
    if not overwrite:
        for c in to_check:
            if c.exists():
                raise _refuse(c)
    stages: dict[Path, Path] = {}
    try:
        for f in finals:
            folder = f.parent
            if folder not in stages:
                stage = folder / f".ttmap-stage-{secrets.token_hex(4)}"
                stage.mkdir()
                stages[folder] = stage
        yield [stages[f.parent] / f.name for f in finals]
        # Commit: check every destination again, then move.
        moves: list[tuple[Path, Path]] = []
        for folder, stage in stages.items():
            for staged in sorted(stage.iterdir()):
                dest = folder / staged.name
                if dest.exists() and not overwrite:
                    raise _refuse(dest)
                moves.append((staged, dest))
        produced = {dest for _, dest in moves}
        if overwrite:
            for c in to_check:
                if c not in produced and c.exists() and c.is_file():
                    c.unlink()
        for staged, dest in moves:
            os.replace(staged, dest)
    finally:
        for stage in stages.values():
            _remove_quietly(stage)


@contextmanager
def atomic_output_multi(
    path: str | os.PathLike[str],
    suffixes: Sequence[str],
    *,
    overwrite: bool,
) -> Iterator[Path]:
    """Write one multi-file product (e.g. an ESRI Shapefile) all-or-nothing.

    Parameters
    ----------
    path : path-like
        Final main file, e.g. ``coast.shp``.
    suffixes : sequence of str
        Companion suffixes that belong to it, e.g. :data:`SHAPEFILE_SUFFIXES`.
    overwrite : bool
        Replace an existing product.

    Yields
    ------
    pathlib.Path
        ``path``'s file name inside a hidden staging folder beside it; the
        driver writes the main file and its companions there.

    Raises
    ------
    OutputExistsError
        The main file or a companion exists and ``overwrite`` is False.

    Notes
    -----
    A thin wrapper of :func:`atomic_output_set` for one product.
    """
    with atomic_output_set([path], overwrite=overwrite, companion_suffixes=suffixes) as staged:
        yield staged[0]

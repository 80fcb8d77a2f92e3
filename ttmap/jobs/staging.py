"""Whole-or-nothing product sets: build in a staging folder, move into place, ``run.json`` last.

Every job writes its products into a staging folder inside the output folder
(``<out>/.ttmap-staging-<pid>-<8 hex>/new``) under their final relative names.
When the job is done, :meth:`Staging.commit` moves the set into place:

1. it works out the earlier run's set: with ``overwrite`` (or when a job
   replaces its own record, as a resumed scenario run does) every file the
   earlier ``run.json`` lists (and ``site_maps/run.json``), the records
   themselves, and any file of the new set's names that exists; with no
   earlier record, the files named as ttmap names its products
   (:func:`ttmap.jobs.plan.is_product_name`). Files the new record lists
   that already sit in the folder (finished scenario tasks) are kept. No
   other file is ever touched; unknown files are named in one line.
2. it writes a journal (``journal.json``) in the staging folder, then moves
   the earlier set into ``<staging>/old``, the new files into place, the run
   records last, and marks the journal ``committed``;
3. it deletes the staging folder (and with it the earlier set).

If anything fails (an error, a full
disk, Ctrl-C, SIGTERM), the moves are undone from the journal and the staging
folder is removed: the folder is as it was before the run. If the process is
killed (SIGKILL, power loss), the next run in the same folder finds the
staging folder (its process is gone, or it is older than
:data:`ttmap.defaults.STALE_STAGING_AGE_S`), undoes a half-done commit from the
journal, removes it and says so in one line (:func:`recover_stale`).
"""

from __future__ import annotations

import errno
import json
import os
import re
import secrets
import shutil
import signal
import threading
import time
import warnings
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ttmap.defaults import STALE_STAGING_AGE_S
from ttmap.errors import InputDataError, OutputExistsError, OutputWriteError, TtmapWarning
from ttmap.faults import checkpoint
from ttmap.jobs.plan import RUN_RECORD_NAME, SUBSET_FOLDERS, is_product_name

__all__ = [
    "STAGING_PREFIX",
    "Staging",
    "Stopped",
    "earlier_set",
    "incomplete_set",
    "recover_stale",
    "staged_output",
    "staging_folders",
]

#: Name prefix of ttmap's staging folders (``.ttmap-staging-<pid>-<8 hex>``).
STAGING_PREFIX: str = ".ttmap-staging-"
_STAGING_RE = re.compile(r"^\.ttmap-staging-(\d+)-([0-9a-f]{8})$")
_JOURNAL = "journal.json"
_COMMITTED = "committed"

#: Staging folders this process is using now (never "stale").
_ACTIVE: set[Path] = set()

Say = Callable[[str], None]


class Stopped(KeyboardInterrupt):
    """A run stopped by Ctrl-C (SIGINT) or SIGTERM.

    Attributes
    ----------
    signum : int
        The signal (``signal.SIGINT`` or ``signal.SIGTERM``).
    note : str
        What the folder holds now, in words (set by :func:`staged_output`).
    """

    def __init__(self, signum: int = signal.SIGINT, note: str = "") -> None:
        super().__init__(signum, note)
        self.signum = int(signum)
        self.note = note


def _note(message: str) -> None:
    """A one-line note for the user (the command line shows it even with --quiet)."""
    warnings.warn(message, TtmapWarning, stacklevel=3)


def _no_space(err: BaseException) -> bool:
    """Whether ``err`` (or what caused it) is a full disk or quota."""
    seen: set[int] = set()
    e: BaseException | None = err
    while e is not None and id(e) not in seen:
        seen.add(id(e))
        if isinstance(e, OSError) and e.errno in (errno.ENOSPC, errno.EDQUOT):
            return True
        if "No space left on device" in str(e) or "Disk quota exceeded" in str(e):
            return True
        e = e.__cause__ or e.__context__
    return False


def _failed_file(err: BaseException, fallback: Path) -> str:
    e: BaseException | None = err
    while e is not None:
        if isinstance(e, OSError) and e.filename:
            return str(e.filename)
        e = e.__cause__ or e.__context__
    return str(fallback)


@contextmanager
def _signals_held() -> Iterator[None]:
    """Let Ctrl-C and SIGTERM wait while a rollback or recovery moves files back.

    The run is stopping (or not started) already: a signal that comes meanwhile
    is dropped, so the undo is never cut short. Python runs signal handlers in
    the main thread only; elsewhere this does nothing.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    held = (signal.SIGINT, signal.SIGTERM)
    previous = {s: signal.signal(s, lambda signum, frame: None) for s in held}
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def staging_folders(out_dir: str | os.PathLike[str]) -> list[Path]:
    """ttmap's staging folders in ``out_dir`` (recognised by name only)."""
    out = Path(out_dir)
    if not out.is_dir():
        return []
    return sorted(p for p in out.iterdir() if _STAGING_RE.match(p.name) and p.is_dir() and not p.is_symlink())


def _is_stale(folder: Path, now: float) -> bool:
    if folder in _ACTIVE:
        return False
    m = _STAGING_RE.match(folder.name)
    assert m is not None
    pid = int(m.group(1))
    if pid == os.getpid():
        return True  # ours, but not in use: left by an earlier job of this process
    if not _pid_alive(pid):
        return True
    try:
        age_s = now - folder.stat().st_mtime
    except OSError:
        return False
    return age_s > STALE_STAGING_AGE_S


def _files_under(root: Path) -> list[str]:
    """Every file below ``root``, relative POSIX paths, run records last (deepest first)."""
    files = [p.relative_to(root).as_posix() for p in root.rglob("*") if p.is_file() or p.is_symlink()]
    records = sorted((f for f in files if f.rsplit("/", 1)[-1] == RUN_RECORD_NAME),
                     key=lambda f: (-f.count("/"), f))
    return sorted(f for f in files if f not in records) + records


def _rollback(stage: Path, out: Path) -> None:
    """Undo a half-done commit from the journal (if any), then delete ``stage``."""
    journal = stage / _JOURNAL
    if journal.is_file() and not (stage / _COMMITTED).exists():
        try:
            plan = json.loads(journal.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            plan = None
        if isinstance(plan, dict):
            new = stage / "new"
            for rel in reversed(list(plan.get("new", []))):
                placed, back = out / rel, new / rel
                if not back.exists() and (placed.exists() or placed.is_symlink()):
                    back.parent.mkdir(parents=True, exist_ok=True)
                    os.replace(placed, back)
            old = stage / "old"
            for rel in plan.get("old", []):
                kept = old / rel
                if kept.exists() or kept.is_symlink():
                    (out / rel).parent.mkdir(parents=True, exist_ok=True)
                    os.replace(kept, out / rel)
            for rel in sorted(plan.get("made_dirs", []), key=lambda d: -d.count("/")):
                try:
                    (out / rel).rmdir()
                except OSError:
                    pass
    shutil.rmtree(stage, ignore_errors=True)


def recover_stale(out_dir: str | os.PathLike[str]) -> list[Path]:
    """Remove staging folders a killed ttmap run left in ``out_dir``; undo half-done commits.

    Only folders named ``.ttmap-staging-<pid>-<hex>`` are touched, and only
    when that process is gone (or the folder is older than
    :data:`ttmap.defaults.STALE_STAGING_AGE_S`). One
    :class:`~ttmap.errors.TtmapWarning` says what was removed.

    Returns
    -------
    list of Path
        The staging folders removed.
    """
    out = Path(out_dir)
    now = time.time()
    removed = [f for f in staging_folders(out) if _is_stale(f, now)]
    if not removed:
        return []
    undone = 0
    with _signals_held():
        for f in removed:
            if (f / _JOURNAL).is_file() and not (f / _COMMITTED).exists():
                undone += 1
            _rollback(f, out)
    what = f"; undid {undone} half-done move into place" if undone else ""
    _note(f"removed {len(removed)} staging folder(s) left by an interrupted ttmap run in "
            f"{str(out)!r} ({', '.join(f.name for f in removed)}){what}")
    return removed


def _safe_relative(entry: Any) -> str | None:
    """A record's product entry as a safe relative path inside the folder, else None."""
    if not isinstance(entry, str) or not entry or "\x00" in entry:
        return None
    p = Path(entry)
    if p.is_absolute() or ".." in p.parts or entry.startswith(("/", "\\")):
        return None
    parts = p.parts
    if parts and _STAGING_RE.match(parts[0]):
        return None
    return p.as_posix()


def _records(out: Path) -> list[str]:
    """The run records in ``out`` (top level and :data:`SUBSET_FOLDERS`), relative."""
    found = []
    for rel in (RUN_RECORD_NAME, *(f"{s}/{RUN_RECORD_NAME}" for s in SUBSET_FOLDERS)):
        if (out / rel).is_file():
            found.append(rel)
    return found


def _listed(out: Path, record_rel: str) -> tuple[list[str], list[str]]:
    """(products a record lists, entries refused as unsafe or unreadable)."""
    base = record_rel.rpartition("/")[0]
    try:
        rec = json.loads((out / record_rel).read_text(encoding="utf-8"))
        entries = rec.get("products", []) if isinstance(rec, dict) else []
    except (OSError, ValueError):
        return [], [record_rel]
    listed, refused = [], []
    for e in entries if isinstance(entries, list) else []:
        rel = _safe_relative(e)
        if rel is None:
            refused.append(str(e))
            continue
        listed.append(f"{base}/{rel}" if base else rel)
    return listed, refused


def incomplete_set(out_dir: str | os.PathLike[str]) -> list[str]:
    """Product-named files in a folder that holds no run record (an incomplete set).

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "arrival_front.tif").write_bytes(b"x"); _ = (d / "notes.txt").write_text("mine")
    >>> incomplete_set(d)
    ['arrival_front.tif']
    >>> _ = (d / "run.json").write_text("{}"); incomplete_set(d)
    []
    """
    out = Path(out_dir)
    if not out.is_dir() or (out / RUN_RECORD_NAME).exists():
        return []
    found = []
    for folder in (out, *(out / s for s in SUBSET_FOLDERS)):
        if folder.is_dir() and not (folder / RUN_RECORD_NAME).exists():
            for p in sorted(folder.iterdir()):
                rel = p.relative_to(out).as_posix()
                if p.is_file() and is_product_name(rel):
                    found.append(rel)
    return found


def earlier_set(out_dir: str | os.PathLike[str]) -> tuple[list[str], list[str]]:
    """The earlier run's files in ``out_dir`` and the record entries refused.

    Every file listed by ``run.json`` (and ``site_maps/run.json``) that
    exists, and the records themselves; with no record, the product-named
    files (:func:`incomplete_set`).

    Returns
    -------
    files : list of str
        Relative POSIX paths.
    refused : list of str
        Record entries that point outside the folder (never touched).
    """
    out = Path(out_dir)
    files: list[str] = []
    refused: list[str] = []
    records = _records(out)
    for rec in records:
        listed, bad = _listed(out, rec)
        refused += bad
        files += [r for r in listed if (out / r).is_file() and r not in files]
        files.append(rec)
    if not records:
        files = incomplete_set(out)
    return files, refused


@dataclass
class Staging:
    """One job's staging folder; products are written under :attr:`new`.

    Attributes
    ----------
    out : Path
        The output folder.
    root : Path
        ``<out>/.ttmap-staging-<pid>-<hex>``.
    overwrite : bool
        Replace the earlier run's set.
    replace_record : bool
        The job replaces an earlier record of its own (a resumed scenario
        run): the earlier set is replaced as with ``overwrite``, and other
        existing files are still refused.
    say : callable, optional
        One-line notes.
    """

    out: Path
    root: Path
    overwrite: bool = False
    replace_record: bool = False
    say: Say | None = None
    committed: list[Path] = field(default_factory=list)

    @property
    def new(self) -> Path:
        """Folder the job writes its products into (final relative names)."""
        return self.root / "new"

    def final(self, path: str | os.PathLike[str]) -> Path:
        """Where a file written under :attr:`new` lands after the commit."""
        p = Path(path)
        try:
            return self.out / p.absolute().relative_to(self.new.absolute())
        except ValueError:
            return p

    def commit(self) -> list[Path]:
        """Move the staged set into place, the earlier set out, the records last."""
        new_files = _files_under(self.new)
        new_listed: set[str] = set()
        for rec in (f for f in new_files if f.rsplit("/", 1)[-1] == RUN_RECORD_NAME):
            listed, _ = _listed(self.new, rec)
            new_listed.update(listed)
        kept = {r for r in new_listed if r not in new_files and (self.out / r).is_file()}
        old: list[str] = []
        refused: list[str] = []
        replacing = self.overwrite or self.replace_record
        if replacing:
            earlier, refused = earlier_set(self.out)
            old = [r for r in earlier if r not in kept]
        for rel in new_files:
            dest = self.out / rel
            if dest.is_dir() and not dest.is_symlink():
                raise InputDataError(f"{str(dest)!r} is a folder where ttmap writes a file; move it away")
            if (dest.exists() or dest.is_symlink()) and rel not in old:
                if not self.overwrite:
                    raise OutputExistsError(f"{str(dest)!r} exists; pass --overwrite to replace it")
                old.append(rel)
        made_dirs = sorted({str(Path(r).parent.as_posix()) for r in new_files
                            if Path(r).parent != Path(".") and not (self.out / r).parent.exists()})
        journal = {"old": old, "new": new_files, "made_dirs": made_dirs}
        # Each move is one rename; whatever stops the loop (an error, a signal,
        # a kill), the journal tells the rollback (now or in the next run) what to undo.
        (self.root / _JOURNAL).write_text(json.dumps(journal), encoding="utf-8")
        for rel in old:
            aside = self.root / "old" / rel
            aside.parent.mkdir(parents=True, exist_ok=True)
            os.replace(self.out / rel, aside)
        for i, rel in enumerate(new_files):
            dest = self.out / rel
            dest.parent.mkdir(parents=True, exist_ok=True)
            os.replace(self.new / rel, dest)
            if i == 0:
                checkpoint("commit", dest)
        (self.root / _COMMITTED).write_text("", encoding="utf-8")
        shutil.rmtree(self.root, ignore_errors=True)  # and with it the earlier set
        self.committed = [self.out / r for r in new_files]
        if self.say is not None:
            if old:
                self.say(f"replaced the earlier run's {len(old)} file(s) in {str(self.out)!r}")
        if replacing:
            self._name_unknown(set(old) | set(new_files) | kept, refused)
        return self.committed

    def _name_unknown(self, ours: set[str], refused: list[str]) -> None:
        """One line naming files in the folder that ttmap left alone."""
        others = []
        for p in sorted(self.out.iterdir()):
            if _STAGING_RE.match(p.name) or p.name in SUBSET_FOLDERS:
                continue
            rel = p.relative_to(self.out).as_posix()
            if rel not in ours:
                others.append(rel + ("/" if p.is_dir() else ""))
        if others:
            shown = ", ".join(others[:5]) + (f" and {len(others) - 5} more" if len(others) > 5 else "")
            _note(f"left alone {len(others)} file(s) that no run record lists and ttmap did not "
                     f"write: {shown}")
        if refused:
            _note(f"left alone {len(refused)} entry(ies) of the earlier run.json that point outside "
                     f"the folder: {', '.join(refused[:3])}")


@contextmanager
def staged_output(
    out_dir: str | os.PathLike[str],
    *,
    overwrite: bool,
    replace_record: bool = False,
    say: Say | None = None,
    stopped_note: Callable[[], str] | None = None,
) -> Iterator[Staging]:
    """Build a product set in a staging folder and commit it whole on success.

    Parameters
    ----------
    out_dir : path-like
        The output folder (created if missing; removed again on failure if
        this run created it and it is empty).
    overwrite : bool
        Replace the earlier run's whole set (see :meth:`Staging.commit`).
    replace_record : bool
        The job replaces its own earlier record (resumed scenario runs).
    say : callable, optional
        One-line notes (stale staging removed, files left alone).
    stopped_note : callable, optional
        What is kept when the run is stopped (default: the folder is as before).

    Yields
    ------
    Staging
        Write products under ``stage.new``; the set is committed when the
        block ends without error.

    Raises
    ------
    Stopped
        Ctrl-C or SIGTERM; ``note`` says what the folder holds.
    OutputWriteError
        No space left on the device (or quota); the folder is as it was.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    created: list[Path] = []
    p = out.absolute()
    while not p.exists():
        created.append(p)
        p = p.parent
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise InputDataError(f"output folder {str(out)!r} cannot be created ({err.strerror}); "
                             "choose another --out folder") from err
    recover_stale(out)
    root = out / f"{STAGING_PREFIX}{os.getpid()}-{secrets.token_hex(4)}"
    stage = Staging(out=out, root=root, overwrite=overwrite, replace_record=replace_record, say=say)
    _ACTIVE.add(root)
    try:
        stage.new.mkdir(parents=True)
        yield stage
        stage.commit()
    except BaseException as err:
        finished = (root / _COMMITTED).exists()
        with _signals_held():
            _rollback(root, out)
            for d in [] if finished else created:  # innermost first
                try:
                    d.rmdir()
                except OSError:
                    break
        if isinstance(err, KeyboardInterrupt):
            note = stopped_note() if stopped_note is not None else ""
            if finished:
                note = f"the run had finished: its product set is complete in {str(out)!r}"
            note = note or f"nothing was written: {str(out)!r} is as it was before the run"
            if isinstance(err, Stopped):
                if not err.note:
                    err.note = note
                raise
            raise Stopped(signal.SIGINT, note) from err
        if isinstance(err, Exception) and _no_space(err):
            raise OutputWriteError(
                f"no space left on device while writing {stage.final(_failed_file(err, out))}; "
                f"free space or choose another --out ({str(out)!r} is as it was before the run)"
            ) from err
        raise
    finally:
        _ACTIVE.discard(root)

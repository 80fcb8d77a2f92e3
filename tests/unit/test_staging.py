"""Staging folders: commit, rollback, stale recovery, the earlier set (in-process, no solve).

The contract checked (a product set appears whole or not at all, run.json
last) is the project's own, stated in README ("What you can rely on").
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from ttmap.errors import OutputExistsError, OutputWriteError
from ttmap.jobs.staging import Stopped, earlier_set, recover_stale, staged_output, staging_folders


def listing(folder: Path) -> dict[str, bytes]:
    return {p.relative_to(folder).as_posix(): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def write_set(folder: Path, names: list[str], tag: str) -> None:
    for n in names:
        (folder / n).parent.mkdir(parents=True, exist_ok=True)
        (folder / n).write_text(f"{tag}:{n}")
    (folder / "run.json").write_text(json.dumps({"products": names}))


def test_commit_moves_the_set_and_removes_staging(tmp_path: Path) -> None:
    out = tmp_path / "out"
    with staged_output(out, overwrite=False) as stage:
        write_set(stage.new, ["arrival_front.tif", "site_maps/map_site_A.png"], "new")
        assert not (out / "arrival_front.tif").exists()  # nothing in place before the commit
    assert set(listing(out)) == {"arrival_front.tif", "site_maps/map_site_A.png", "run.json"}
    assert staging_folders(out) == []


def test_failure_leaves_no_folder_it_created(tmp_path: Path) -> None:
    out = tmp_path / "a" / "b"
    with pytest.raises(RuntimeError):
        with staged_output(out, overwrite=False) as stage:
            (stage.new / "arrival_front.tif").write_text("x")
            raise RuntimeError("boom")
    assert not (tmp_path / "a").exists()


def test_overwrite_replaces_the_listed_set_and_keeps_unknown_files(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    write_set(out, ["arrival_front.tif", "arrival_group_T600s.tif"], "old")
    (out / "mine.txt").write_text("user")
    with pytest.warns(UserWarning, match="left alone 1 file"):
        with staged_output(out, overwrite=True) as stage:
            write_set(stage.new, ["arrival_front.tif"], "new")
    assert listing(out) == {"arrival_front.tif": b"new:arrival_front.tif", "mine.txt": b"user",
                            "run.json": json.dumps({"products": ["arrival_front.tif"]}).encode()}


def test_record_entries_outside_the_folder_are_never_touched(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    victim = tmp_path / "victim.txt"
    victim.write_text("keep me")
    (out / "run.json").write_text(json.dumps({"products": ["../victim.txt", "/etc/hostname"]}))
    files, refused = earlier_set(out)
    assert files == ["run.json"] and refused == ["../victim.txt", "/etc/hostname"]
    with pytest.warns(UserWarning, match="point outside the folder"):
        with staged_output(out, overwrite=True) as stage:
            write_set(stage.new, ["arrival_front.tif"], "new")
    assert victim.read_text() == "keep me"


def test_existing_file_without_overwrite_is_refused_and_nothing_moves(tmp_path: Path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "arrival_front.tif").write_text("other")
    before = listing(out)
    with pytest.raises(OutputExistsError):
        with staged_output(out, overwrite=False) as stage:
            write_set(stage.new, ["arrival_front.tif"], "new")
    assert listing(out) == before and staging_folders(out) == []


@pytest.mark.parametrize("fail_after", [0, 1, 2])
def test_failed_commit_restores_the_earlier_set(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                fail_after: int) -> None:
    """ENOSPC on the n-th rename of the commit: every move is undone from the journal."""
    out = tmp_path / "out"
    out.mkdir()
    write_set(out, ["arrival_front.tif", "map_front.png"], "old")
    before = listing(out)
    real = os.replace
    calls = {"n": 0}

    def replace(src: object, dst: object) -> None:
        if ".ttmap-staging-" not in str(dst):  # a move into place
            calls["n"] += 1
            if calls["n"] > fail_after and calls.get("armed", True):
                calls["armed"] = False
                raise OSError(28, "No space left on device", str(dst))
        real(src, dst)  # type: ignore[arg-type]

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(OutputWriteError, match="no space left on device while writing"):
        with staged_output(out, overwrite=True) as stage:
            write_set(stage.new, ["arrival_front.tif", "coast_front.gpkg"], "new")
    assert listing(out) == before
    assert staging_folders(out) == []


def test_stopped_note_says_the_folder_is_as_before(tmp_path: Path) -> None:
    out = tmp_path / "out"
    with pytest.raises(Stopped) as info:
        with staged_output(out, overwrite=False):
            raise KeyboardInterrupt
    assert "is as it was before the run" in info.value.note
    assert not out.exists()


def test_stale_staging_of_a_dead_process_is_rolled_back(tmp_path: Path) -> None:
    """A commit killed half-way: the next run undoes it from the journal."""
    out = tmp_path / "out"
    out.mkdir()
    write_set(out, ["arrival_front.tif"], "old")
    before = listing(out)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                          text=True, check=True)
    pid = int(dead.stdout)
    stage = out / f".ttmap-staging-{pid}-deadbeef"
    (stage / "old").mkdir(parents=True)
    (stage / "new").mkdir()
    # as left by a kill: old set moved aside, one new file moved in, run.json not yet
    os.replace(out / "arrival_front.tif", stage / "old" / "arrival_front.tif")
    os.replace(out / "run.json", stage / "old" / "run.json")
    (out / "map_front.png").write_text("new")
    (stage / "new" / "run.json").write_text("{}")
    (stage / "journal.json").write_text(json.dumps(
        {"old": ["arrival_front.tif", "run.json"], "new": ["map_front.png", "run.json"], "made_dirs": []}))
    with pytest.warns(UserWarning, match="removed 1 staging folder.*undid 1 half-done move"):
        assert recover_stale(out) == [stage]
    assert listing(out) == before


def test_foreign_names_are_never_removed(tmp_path: Path) -> None:
    out = tmp_path / "out"
    for name in (".ttmap-staging-x-0123abcd", ".ttmap-staging-1-XYZ", "ttmap-staging-1-0123abcd"):
        (out / name).mkdir(parents=True)
    assert recover_stale(out) == []
    assert len(list(out.iterdir())) == 3


def test_fault_hook_raises_the_named_errno_only_at_its_stage(monkeypatch: pytest.MonkeyPatch) -> None:
    import errno

    from ttmap.faults import checkpoint

    monkeypatch.setenv("TTMAP_TEST_FAIL_AT", "record:ENOSPC")
    checkpoint("solved")  # another stage: nothing
    with pytest.raises(OSError) as info:
        checkpoint("record", "out/run.json")
    assert info.value.errno == errno.ENOSPC and info.value.filename == "out/run.json"

"""Tests of ttmap.io.atomic: all-or-nothing outputs."""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from ttmap.errors import InputDataError, OutputExistsError
from ttmap.io.atomic import (
    SHAPEFILE_SUFFIXES,
    atomic_output,
    atomic_output_multi,
    atomic_output_set,
    check_writable,
)


class Boom(RuntimeError):
    """A failure raised on purpose inside a write block."""


def listing(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


# ------------------------------------------------------------ atomic_output


def test_success_renames_temp_to_final(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    with atomic_output(out, overwrite=False) as tmp:
        assert tmp.parent == tmp_path
        assert tmp.name.startswith(".arrival.tmp-")
        assert tmp.suffix == ".tif"
        assert not out.exists()
        tmp.write_bytes(b"data")
    assert out.read_bytes() == b"data"
    assert listing(tmp_path) == ["arrival.tif"]


def test_exception_leaves_neither_temp_nor_final(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    with pytest.raises(Boom):
        with atomic_output(out, overwrite=False) as tmp:
            tmp.write_bytes(b"half")
            raise Boom("disk full")
    assert listing(tmp_path) == []


def test_failure_mid_write_keeps_old_product(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    out.write_bytes(b"old complete product")
    with pytest.raises(Boom):
        with atomic_output(out, overwrite=True) as tmp:
            with open(tmp, "wb") as fh:
                fh.write(b"new but")
                fh.flush()
                raise Boom("interrupted")
    assert out.read_bytes() == b"old complete product"
    assert listing(tmp_path) == ["arrival.tif"]


def test_sidecars_of_temp_are_renamed_or_removed(tmp_path: Path) -> None:
    out = tmp_path / "a.tif"
    with atomic_output(out, overwrite=False) as tmp:
        tmp.write_bytes(b"x")
        Path(str(tmp) + ".aux.xml").write_text("<PAMDataset/>")
    assert listing(tmp_path) == ["a.tif", "a.tif.aux.xml"]

    out2 = tmp_path / "b.tif"
    with pytest.raises(Boom):
        with atomic_output(out2, overwrite=False) as tmp:
            tmp.write_bytes(b"x")
            Path(str(tmp) + ".ovr").write_bytes(b"y")
            raise Boom
    assert listing(tmp_path) == ["a.tif", "a.tif.aux.xml"]


def test_existing_file_refused_before_anything_is_written(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    out.write_bytes(b"keep me")
    entered = False
    with pytest.raises(OutputExistsError, match=r"arrival\.tif' exists; pass --overwrite"):
        with atomic_output(out, overwrite=False):
            entered = True
    assert not entered
    assert out.read_bytes() == b"keep me"
    assert listing(tmp_path) == ["arrival.tif"]


def test_overwrite_replaces(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    out.write_bytes(b"old")
    with atomic_output(out, overwrite=True) as tmp:
        tmp.write_bytes(b"new")
    assert out.read_bytes() == b"new"


def test_file_appearing_during_write_is_not_clobbered(tmp_path: Path) -> None:
    out = tmp_path / "arrival.tif"
    with pytest.raises(OutputExistsError):
        with atomic_output(out, overwrite=False) as tmp:
            tmp.write_bytes(b"ours")
            out.write_bytes(b"someone else's")
    assert out.read_bytes() == b"someone else's"
    assert listing(tmp_path) == ["arrival.tif"]


def test_block_that_writes_nothing_creates_nothing(tmp_path: Path) -> None:
    with atomic_output(tmp_path / "x.tif", overwrite=False):
        pass
    assert listing(tmp_path) == []


def test_missing_folder_refused(tmp_path: Path) -> None:
    with pytest.raises(InputDataError, match="does not exist; create it first"):
        with atomic_output(tmp_path / "nope" / "x.tif", overwrite=False):
            pass


def test_folder_as_output_refused(tmp_path: Path) -> None:
    (tmp_path / "d.tif").mkdir()
    with pytest.raises(InputDataError, match="is a folder"):
        with atomic_output(tmp_path / "d.tif", overwrite=True):
            pass


# ------------------------------------------------------------ check_writable


def test_check_writable_refuses_existing_and_duplicates(tmp_path: Path) -> None:
    a, b = tmp_path / "a.tif", tmp_path / "b.gpkg"
    check_writable([a, b], overwrite=False)  # nothing exists yet
    b.write_bytes(b"")
    with pytest.raises(OutputExistsError, match=r"b\.gpkg' exists"):
        check_writable([a, b], overwrite=False)
    check_writable([a, b], overwrite=True)
    with pytest.raises(InputDataError, match="two outputs would both be written"):
        check_writable([a, tmp_path / "." / "a.tif"], overwrite=True)
    with pytest.raises(InputDataError, match="does not exist"):
        check_writable([tmp_path / "missing" / "c.tif"], overwrite=True)
    assert listing(tmp_path) == ["b.gpkg"]


# ------------------------------------------------------------ multi-file


def _fake_shapefile(
    main: Path, suffixes: tuple[str, ...] = (".shp", ".shx", ".dbf", ".prj")
) -> None:
    for s in suffixes:
        main.with_suffix(s).write_bytes(s.encode())


def test_multi_success_moves_all_companions(tmp_path: Path) -> None:
    out = tmp_path / "coast.shp"
    with atomic_output_multi(out, SHAPEFILE_SUFFIXES, overwrite=False) as staged:
        assert staged.name == "coast.shp"
        assert staged.parent != tmp_path
        _fake_shapefile(staged)
        assert not out.exists()
    assert listing(tmp_path) == ["coast.dbf", "coast.prj", "coast.shp", "coast.shx"]


def test_multi_failure_leaves_nothing(tmp_path: Path) -> None:
    out = tmp_path / "coast.shp"
    with pytest.raises(Boom):
        with atomic_output_multi(out, SHAPEFILE_SUFFIXES, overwrite=False) as staged:
            _fake_shapefile(staged, (".shp", ".shx"))
            raise Boom
    assert listing(tmp_path) == []


def test_multi_refuses_existing_companion(tmp_path: Path) -> None:
    (tmp_path / "coast.dbf").write_bytes(b"old")
    with pytest.raises(OutputExistsError, match=r"coast\.dbf' exists"):
        with atomic_output_multi(tmp_path / "coast.shp", SHAPEFILE_SUFFIXES, overwrite=False):
            pass
    assert listing(tmp_path) == ["coast.dbf"]


def test_multi_overwrite_removes_stale_companions(tmp_path: Path) -> None:
    out = tmp_path / "coast.shp"
    _fake_shapefile(out, (".shp", ".shx", ".dbf", ".prj", ".cpg", ".qix"))
    with atomic_output_multi(out, SHAPEFILE_SUFFIXES, overwrite=True) as staged:
        _fake_shapefile(staged, (".shp", ".shx", ".dbf"))
        staged.with_suffix(".shp").write_bytes(b"new")
    assert listing(tmp_path) == ["coast.dbf", "coast.shp", "coast.shx"]
    assert out.read_bytes() == b"new"


def test_set_commits_all_or_nothing(tmp_path: Path) -> None:
    outs = [tmp_path / "iso_lines.geojson", tmp_path / "iso_bands.geojson"]
    with pytest.raises(Boom):
        with atomic_output_set(outs, overwrite=False) as staged:
            staged[0].write_text("{}")
            raise Boom("second layer failed")
    assert listing(tmp_path) == []
    with atomic_output_set(outs, overwrite=False) as staged:
        assert [p.name for p in staged] == ["iso_lines.geojson", "iso_bands.geojson"]
        for p in staged:
            p.write_text("{}")
    assert listing(tmp_path) == ["iso_bands.geojson", "iso_lines.geojson"]
    assert not any(name.startswith(".") for name in os.listdir(tmp_path))

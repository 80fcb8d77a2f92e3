"""Write layer styles where desktop GIS clients find them on their own.

- :func:`qml_path_for` / :func:`write_qml_beside` - a QGIS style file with
  the layer's base name beside a raster, Shapefile or GeoJSON file
  (``arrival_front.qml`` beside ``arrival_front.tif``). QGIS loads it when
  the layer is opened.
- :func:`write_gpkg_layer_style` - a row in the ``layer_styles`` table of a
  GeoPackage, the table QGIS (and other clients following the same
  convention) read a layer's default style from. The table is created when
  missing and registered in ``gpkg_contents`` as an attributes table, so the
  file stays a valid GeoPackage; everything happens in one SQLite
  transaction (all or nothing).
- :func:`read_gpkg_layer_styles` - the rows, for checks.
- :func:`write_sld` - an OGC SLD document (from :mod:`ttmap.products.styles`),
  checked to be well-formed XML and written all or nothing.

The module writes text it is given; it knows nothing of colours or physics.
"""

from __future__ import annotations

import datetime as _dt
import os
import sqlite3
from collections.abc import Iterator
from contextlib import closing, contextmanager
from pathlib import Path
from typing import Any

from ttmap.errors import InputDataError
from ttmap.io.atomic import atomic_output

__all__ = [
    "LAYER_STYLES_TABLE",
    "LAYER_STYLES_COLUMNS",
    "qml_path_for",
    "write_qml",
    "write_qml_beside",
    "write_sld",
    "write_gpkg_layer_style",
    "read_gpkg_layer_styles",
]

#: Name of the style table inside a GeoPackage.
LAYER_STYLES_TABLE = "layer_styles"

#: Its columns after the ``id`` key, in the order QGIS creates them.
LAYER_STYLES_COLUMNS: tuple[str, ...] = (
    "f_table_catalog",
    "f_table_schema",
    "f_table_name",
    "f_geometry_column",
    "styleName",
    "styleQML",
    "styleSLD",
    "useAsDefault",
    "description",
    "owner",
    "ui",
    "update_time",
)

_CREATE = f"""
CREATE TABLE IF NOT EXISTS "{LAYER_STYLES_TABLE}" (
  "id" INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL,
  "f_table_catalog" TEXT(256),
  "f_table_schema" TEXT(256),
  "f_table_name" TEXT(256),
  "f_geometry_column" TEXT(256),
  "styleName" TEXT(30),
  "styleQML" TEXT,
  "styleSLD" TEXT,
  "useAsDefault" BOOLEAN,
  "description" TEXT,
  "owner" TEXT(30),
  "ui" TEXT(30),
  "update_time" DATETIME DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now'))
)
"""


def qml_path_for(layer_path: str | os.PathLike[str]) -> Path:
    """The style file QGIS looks for beside a layer file: same base name, ``.qml``.

    Examples
    --------
    >>> qml_path_for("out/arrival_front.tif").as_posix()
    'out/arrival_front.qml'
    >>> qml_path_for("out/coast_front.shp").name
    'coast_front.qml'
    """
    return Path(layer_path).with_suffix(".qml")


def _check_qml(path: str | os.PathLike[str], qml_text: str) -> None:
    import xml.etree.ElementTree as ET

    body = qml_text.split("\n", 1)[1] if qml_text.startswith("<!DOCTYPE") else qml_text
    try:
        root = ET.fromstring(body.encode("utf-8"))
    except ET.ParseError as err:
        raise InputDataError(f"style for {os.fspath(path)!r} is not well-formed XML: {err}") from err
    if root.tag != "qgis":
        raise InputDataError(
            f"style for {os.fspath(path)!r} has root element {root.tag!r}, not 'qgis'; "
            "pass a document from ttmap.products.qml"
        )


def write_qml(path: str | os.PathLike[str], qml_text: str, *, overwrite: bool = False) -> Path:
    """Write a QML document (UTF-8) all or nothing.

    Raises
    ------
    InputDataError
        ``qml_text`` is not a well-formed QML document.
    OutputExistsError
        ``path`` exists and ``overwrite`` is False.
    """
    _check_qml(path, qml_text)
    with atomic_output(path, overwrite=overwrite) as tmp:
        tmp.write_text(qml_text, encoding="utf-8")
    return Path(path)


def write_sld(path: str | os.PathLike[str], xml_text: str, *, overwrite: bool = False) -> Path:
    """Write an SLD document (UTF-8) all-or-nothing.

    Parameters
    ----------
    path : path-like
        Output file, conventionally ``<product>.sld`` beside the layer.
    xml_text : str
        An SLD document, e.g. from :func:`ttmap.products.styles.raster_sld`,
        :func:`~ttmap.products.styles.bands_sld` or
        :func:`~ttmap.products.styles.lines_sld`.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    InputDataError
        ``xml_text`` is not well-formed XML.
    OutputExistsError
        ``path`` exists and ``overwrite`` is False.
    """
    import xml.etree.ElementTree as ET

    try:
        ET.fromstring(xml_text.encode("utf-8"))
    except ET.ParseError as err:
        raise InputDataError(
            f"style for {os.fspath(path)!r} is not well-formed XML: {err}"
        ) from err
    with atomic_output(path, overwrite=overwrite) as tmp:
        tmp.write_text(xml_text, encoding="utf-8")
    return Path(path)


def write_qml_beside(layer_path: str | os.PathLike[str], qml_text: str, *,
                     overwrite: bool = False) -> Path:
    """Write ``<layer base name>.qml`` beside an existing layer file.

    Parameters
    ----------
    layer_path : path-like
        The raster, Shapefile (``.shp``) or GeoJSON file; it must exist.
    qml_text : str
        A document from :mod:`ttmap.products.qml`.
    overwrite : bool
        Replace an existing style file.

    Returns
    -------
    Path
        The style file written.

    Raises
    ------
    InputDataError
        The layer file is missing, or the text is not a QML document.
    OutputExistsError
        The style file exists and ``overwrite`` is False.
    """
    layer = Path(layer_path)
    if not layer.is_file():
        raise InputDataError(f"layer file {str(layer)!r} does not exist; write the layer before its style")
    if layer.suffix.lower() == ".gpkg":
        raise InputDataError(
            f"{str(layer)!r} is a GeoPackage; store its styles inside it with write_gpkg_layer_style"
        )
    return write_qml(qml_path_for(layer), qml_text, overwrite=overwrite)


@contextmanager
def _gpkg(path: Path) -> Iterator[sqlite3.Connection]:
    if not path.is_file():
        raise InputDataError(f"GeoPackage {str(path)!r} does not exist; write the layer first")
    try:
        con = sqlite3.connect(path, isolation_level=None)
    except sqlite3.Error as err:
        raise InputDataError(f"cannot open GeoPackage {str(path)!r}: {err}") from err
    with closing(con):
        yield con


def _geometry_column(con: sqlite3.Connection, path: Path, layer_name: str) -> str:
    try:
        row = con.execute(
            "SELECT column_name FROM gpkg_geometry_columns WHERE lower(table_name) = lower(?)",
            (layer_name,),
        ).fetchone()
        known = [r[0] for r in con.execute("SELECT table_name FROM gpkg_contents")]
    except sqlite3.Error as err:
        raise InputDataError(f"{str(path)!r} is not a GeoPackage ({err}); give a .gpkg written by ttmap") from err
    if layer_name not in known:
        raise InputDataError(
            f"GeoPackage {str(path)!r} has no layer {layer_name!r}; its layers: {', '.join(known) or 'none'}"
        )
    return str(row[0]) if row else ""


def write_gpkg_layer_style(
    gpkg_path: str | os.PathLike[str],
    layer_name: str,
    qml_text: str,
    *,
    sld_text: str | None = None,
    style_name: str | None = None,
    description: str = "",
    owner: str = "ttmap",
    use_as_default: bool = True,
) -> int:
    """Store a style for one layer in the GeoPackage's ``layer_styles`` table.

    Parameters
    ----------
    gpkg_path : path-like
        An existing GeoPackage holding ``layer_name``.
    layer_name : str
        The layer (table) the style is for.
    qml_text : str
        The QGIS style (:mod:`ttmap.products.qml`).
    sld_text : str, optional
        The same style as SLD (:mod:`ttmap.products.styles`), stored beside it.
    style_name : str, optional
        Name shown in the client's style list; the layer name by default.
    description : str
        Free text (put the caution here).
    owner : str
        Who wrote the style.
    use_as_default : bool
        Mark it as the layer's default style (the one opened with the layer).
        Any other default of the same layer is unmarked.

    Returns
    -------
    int
        The ``id`` of the row written.

    Raises
    ------
    InputDataError
        A missing file, not a GeoPackage, no such layer, or a text that is not
        a QML document.

    Notes
    -----
    A style of the same layer and name is replaced. The table is the one
    QGIS creates (same columns and types) and is registered in
    ``gpkg_contents`` (data type ``attributes``) and, when present, in
    GDAL's ``gpkg_ogr_contents`` with its row count, so GDAL lists it as a
    plain table. One transaction: on any error the file is left as it was.
    """
    path = Path(gpkg_path)
    _check_qml(path, qml_text)
    if not isinstance(layer_name, str) or not layer_name:
        raise InputDataError(f"layer name {layer_name!r} is empty; give the GeoPackage layer's name")
    name = style_name or layer_name
    now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"
    with _gpkg(path) as con:
        geom = _geometry_column(con, path, layer_name)
        try:
            con.execute("BEGIN IMMEDIATE")
            con.execute(_CREATE)
            con.execute(
                "INSERT OR IGNORE INTO gpkg_contents (table_name, data_type, identifier, description, "
                "last_change) VALUES (?, 'attributes', ?, '', ?)",
                (LAYER_STYLES_TABLE, LAYER_STYLES_TABLE, now),
            )
            con.execute(
                f'DELETE FROM "{LAYER_STYLES_TABLE}" WHERE f_table_name = ? AND styleName = ?',
                (layer_name, name),
            )
            if use_as_default:
                con.execute(
                    f'UPDATE "{LAYER_STYLES_TABLE}" SET useAsDefault = 0 WHERE f_table_name = ?',
                    (layer_name,),
                )
            cur = con.execute(
                f'INSERT INTO "{LAYER_STYLES_TABLE}" (f_table_catalog, f_table_schema, f_table_name, '
                "f_geometry_column, styleName, styleQML, styleSLD, useAsDefault, description, owner, ui, "
                "update_time) VALUES ('', '', ?, ?, ?, ?, ?, ?, ?, ?, '', ?)",
                (layer_name, geom, name, qml_text, sld_text or "", 1 if use_as_default else 0,
                 description, owner, now),
            )
            row_id = int(cur.lastrowid or 0)
            has_ogr = con.execute(
                "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'gpkg_ogr_contents'"
            ).fetchone()
            if has_ogr:
                count = con.execute(f'SELECT count(*) FROM "{LAYER_STYLES_TABLE}"').fetchone()[0]
                con.execute(
                    "DELETE FROM gpkg_ogr_contents WHERE lower(table_name) = lower(?)", (LAYER_STYLES_TABLE,)
                )
                con.execute(
                    "INSERT INTO gpkg_ogr_contents (table_name, feature_count) VALUES (?, ?)",
                    (LAYER_STYLES_TABLE, int(count)),
                )
            con.execute("COMMIT")
        except sqlite3.Error as err:
            con.execute("ROLLBACK")
            raise InputDataError(f"cannot store the style of {layer_name!r} in {str(path)!r}: {err}") from err
    return row_id


def read_gpkg_layer_styles(gpkg_path: str | os.PathLike[str]) -> list[dict[str, Any]]:
    """Every row of a GeoPackage's ``layer_styles`` table (empty if there is none).

    Returns
    -------
    list of dict
        One dict per row with ``id`` and the :data:`LAYER_STYLES_COLUMNS`.
    """
    path = Path(gpkg_path)
    with _gpkg(path) as con:
        if not con.execute(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = ?", (LAYER_STYLES_TABLE,)
        ).fetchone():
            return []
        cols = ("id", *LAYER_STYLES_COLUMNS)
        rows = con.execute(
            f'SELECT {", ".join(cols)} FROM "{LAYER_STYLES_TABLE}" ORDER BY id'
        ).fetchall()
    return [dict(zip(cols, r, strict=True)) for r in rows]

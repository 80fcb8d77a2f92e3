"""Write the HTML report all or nothing.

:func:`write_report` writes the text of
:func:`ttmap.products.report.render_report` under a temporary name beside
the target and renames it into place (:mod:`ttmap.io.atomic`), so a reader
never sees half a report and an existing one is kept unless asked.
"""

from __future__ import annotations

import os
from pathlib import Path

from ttmap.errors import InputDataError
from ttmap.io.atomic import atomic_output

__all__ = ["REPORT_NAME", "write_report"]

#: The report's file name in a run's folder.
REPORT_NAME = "report.html"


def write_report(path: str | os.PathLike[str], html: str, *, overwrite: bool = False) -> Path:
    """Write an HTML report (UTF-8), atomically.

    Parameters
    ----------
    path : path-like
        Target file, conventionally ``<run folder>/report.html`` (its links
        to products are relative to that folder).
    html : str
        A complete HTML document.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    InputDataError
        ``html`` is not a complete HTML document.
    OutputExistsError
        ``path`` exists and ``overwrite`` is False.
    """
    text = html.lstrip()
    if not text.lower().startswith("<!doctype html") or "</html>" not in text[-200:].lower():
        raise InputDataError(
            f"report for {os.fspath(path)!r} is not a complete HTML document; "
            "pass the text of ttmap.products.report.render_report"
        )
    with atomic_output(path, overwrite=overwrite) as tmp:
        tmp.write_text(html, encoding="utf-8")
    return Path(path)

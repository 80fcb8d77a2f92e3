"""Fault-injection hooks for tests: pause or fail a run at a named stage.

Jobs call :func:`checkpoint` at a few named stages. Normally it does nothing
(one dictionary look-up). Two environment variables turn it on, so a test can
stop a real ``ttmap`` process at a known point without root or special
mounts:

``TTMAP_TEST_PAUSE_AT=<stage>``
    At that stage, write the stage name to the file named by
    ``TTMAP_TEST_READY_FILE`` (if set) and sleep (at most
    :data:`PAUSE_LIMIT_S`), so the test can send a signal or SIGKILL.
``TTMAP_TEST_FAIL_AT=<stage>:<errno name>``
    At that stage raise ``OSError`` with that errno (e.g. ``commit:ENOSPC``),
    as a full disk would.

The stages (:data:`STAGES`):

- ``solved`` - after the first solve (scenario run: after every task);
- ``products`` - after the first product set is written (mid-products);
- ``record`` - just before ``run.json`` is written;
- ``commit`` - while moving the product set into place (after the earlier
  set was moved aside and the first new file moved in).
"""

from __future__ import annotations

import errno
import os
import time
from pathlib import Path

__all__ = ["PAUSE_LIMIT_S", "STAGES", "checkpoint"]

#: Named stages where jobs call :func:`checkpoint`.
STAGES: tuple[str, ...] = ("solved", "products", "record", "commit")

#: Longest pause (seconds), so a forgotten test cannot hang for ever.
PAUSE_LIMIT_S: float = 120.0


def checkpoint(stage: str, path: str | os.PathLike[str] | None = None) -> None:
    """Pause or fail here when the test hooks ask for ``stage``.

    Parameters
    ----------
    stage : str
        One of :data:`STAGES`.
    path : path-like, optional
        File named in an injected error (as ``OSError.filename``).

    Raises
    ------
    OSError
        ``TTMAP_TEST_FAIL_AT`` names this stage.

    Examples
    --------
    >>> checkpoint("solved")  # no hook set: nothing happens
    """
    pause = os.environ.get("TTMAP_TEST_PAUSE_AT")
    fail = os.environ.get("TTMAP_TEST_FAIL_AT")
    if not pause and not fail:
        return
    if fail:
        where, _, code_name = fail.partition(":")
        if where == stage:
            code = getattr(errno, code_name or "ENOSPC", errno.ENOSPC)
            raise OSError(code, os.strerror(code), None if path is None else str(path))
    if pause == stage:
        ready = os.environ.get("TTMAP_TEST_READY_FILE")
        if ready:
            Path(ready).write_text(stage, encoding="utf-8")
        deadline = time.monotonic() + PAUSE_LIMIT_S
        while time.monotonic() < deadline:
            time.sleep(0.05)

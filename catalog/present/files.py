"""Writing output files safely: whole or not at all, and with no cell a spreadsheet would run as a formula.

Two habits every export and report follows:

- **Atomic replace.** The file is written to a temporary file in the same folder, flushed to disk, then renamed over
  the target (``os.replace`` is atomic within one file system, POSIX ``rename(2)``). A full disk or a crash
  leaves the previous file, never a truncated one.
- **No live formulas.** A text cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is
  what spreadsheet programs read as a formula. Such text gets a leading single quote, the neutralisation the OWASP
  "CSV Injection" page recommends, so an id like ``=HYPERLINK(...)`` shows as text in every program.
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path

import pandas as pd

from catalog.errors import CatalogError

__all__ = ["FORMULA_STARTS", "atomic_write", "neutralise", "neutralise_frame"]

#: First characters that make a spreadsheet cell a formula (OWASP, CSV Injection).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutralise(value):
    """``value`` unchanged unless it is text starting with one of :data:`FORMULA_STARTS`; then ``"'" + value``."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy with every text cell and column name passed through :func:`neutralise`; numbers stay numbers."""
    out = frame.copy()
    for name in out.columns:
        if not (pd.api.types.is_numeric_dtype(out[name]) or pd.api.types.is_bool_dtype(out[name])):
            out[name] = out[name].map(neutralise, na_action="ignore")
    out.columns = [neutralise(str(c)) for c in out.columns]
    return out


def _file_mode() -> int:
    # Temporary files are created private (0600); the finished file gets the mode a plain open() would give it.
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def atomic_write(path: str | os.PathLike, write: Callable[[Path], None]) -> Path:
    """Let ``write`` fill a temporary file next to ``path``, then rename it over ``path``.

    Parameters
    ----------
    path : str or PathLike
        The file to create or replace.
    write : callable
        Called with the temporary file's path; writes the whole content.

    Returns
    -------
    Path

    Raises
    ------
    CatalogError
        The folder is missing or not writable, the disk is full, or the target cannot be replaced; the target is
        left as it was and the temporary file is removed.
    """
    path = Path(path)
    try:
        handle, name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".part")
    except OSError as exc:
        raise CatalogError(f"could not write '{path}': {exc.strerror or exc}") from exc
    os.close(handle)
    temp = Path(name)
    try:
        write(temp)
        with open(temp, "rb+") as done:
            os.fsync(done.fileno())
        os.chmod(temp, _file_mode())
        os.replace(temp, path)
    except OSError as exc:
        raise CatalogError(f"could not write '{path}': {exc.strerror or exc}; the previous file, if any, is "
                           "unchanged") from exc
    finally:
        temp.unlink(missing_ok=True)
    return path

"""Read zip containers (a .zip upload, an .xlsx workbook) without trusting what they say about themselves.

A zip member's header declares its uncompressed size, but nothing forces the data to match: a few megabytes can
inflate to gigabytes. Every reader here streams members in blocks and stops on the real byte count, so memory and
disk stay bounded whatever the header claims.
"""

from __future__ import annotations

import zipfile
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO

from catalog.errors import CatalogError

#: Largest total of decompressed bytes accepted from one workbook: ample for a campaign sheet of a few million cells.
WORKBOOK_UNPACKED_LIMIT = 512 * 2**20
_BLOCK = 1 << 20


def open_zip(source: str | Path | BinaryIO, label: str) -> zipfile.ZipFile:
    """Open a zip container, turning a damaged one into a plain message."""
    try:
        return zipfile.ZipFile(source)
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise CatalogError(f"{label}: not a readable zip container ({exc})") from exc


def stream_member(
    archive: zipfile.ZipFile, info: zipfile.ZipInfo, budget: int, label: str, sink: Callable[[bytes], object]
) -> int:
    """Pass one member's decompressed bytes to ``sink`` in blocks; return the count, at most ``budget``.

    Raises
    ------
    CatalogError
        When the member holds more than ``budget`` bytes (counted, not declared), is encrypted, uses a
        compression method this Python cannot read (e.g. deflate64), or fails its CRC check.
    """
    name = info.filename
    read = 0
    try:
        with archive.open(info) as member:
            for block in iter(lambda: member.read(_BLOCK), b""):
                read += len(block)
                if read > budget:
                    raise CatalogError(f"{label}: '{name}' unpacks to more than the {_mb(budget)} allowed; refused "
                                       "before parsing (import a campaign this large as CSV files)")
                sink(block)
    # NotImplementedError is a RuntimeError: it must be caught first.
    except NotImplementedError as exc:
        raise CatalogError(f"{label}: '{name}' uses a compression method that cannot be read here ({exc}); "
                           "re-save it with ordinary (deflate) compression") from exc
    except RuntimeError as exc:  # zipfile's signal for an encrypted member
        raise CatalogError(f"{label}: '{name}' is encrypted; save it without a password") from exc
    except (zipfile.BadZipFile, EOFError, OSError, ValueError) as exc:
        raise CatalogError(f"{label}: '{name}' is damaged ({exc})") from exc
    return read


def check_unpacked_size(path: Path, limit: int | None = None) -> None:
    """Refuse a workbook whose members together decompress to more than ``limit`` bytes.

    ``limit`` defaults to :data:`WORKBOOK_UNPACKED_LIMIT`. Every member is decompressed and counted without being
    kept, so the check costs time but no memory.
    """
    label = path.name
    with open_zip(path, label) as archive:
        left = WORKBOOK_UNPACKED_LIMIT if limit is None else limit
        for info in archive.infolist():
            if not info.is_dir():
                left -= stream_member(archive, info, left, label, lambda block: None)


def _mb(n: int) -> str:
    return f"{n / 2**20:.0f} MB"

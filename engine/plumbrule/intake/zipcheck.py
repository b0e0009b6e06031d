"""Refuse a zip bomb before any part of an .xlsx/.xlsm is inflated.

An .xlsx is a zip archive; its directory says how large each part becomes when
inflated. A few megabytes of deflate data can inflate to gigabytes (deflate reaches
about 1032:1), and python-calamine and the XML scans hold a whole part in memory. So
every reader of a workbook calls :func:`check_package` first, which reads only the zip
directory and refuses, in one line naming the part:

* a part larger than :data:`MAX_PART_BYTES` (2 GiB) inflated;
* parts larger than :data:`MAX_TOTAL_BYTES` (4 GiB) inflated in all;
* a part larger than :data:`RATIO_FROM_BYTES` (50 MiB) inflated that is more than
  :data:`MAX_RATIO` (200) times its compressed size.

Why these: a sheet of a million rows by twenty columns is about 100-200 MB of XML, so a
real book stays an order of magnitude below the size limits. Sheet XML deflates little,
because every cell carries its own reference (measured: the demo book's Sales sheet 8:1,
100,000 identical rows written by openpyxl 12:1); 200:1 on a part of more than 50 MiB is
a bomb, not a sales sheet, and a smaller part is harmless whatever its ratio. The limits
are documented in docs/workbook.md.

A directory that understates a part's size is not caught here: Python's zipfile stops
at the stated size (and fails the CRC check), python-calamine does not.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

from plumbrule.errors import WorkbookError

MAX_PART_BYTES = 2 * 1024 ** 3
MAX_TOTAL_BYTES = 4 * 1024 ** 3
RATIO_FROM_BYTES = 50 * 1024 ** 2
MAX_RATIO = 200

_FIX = ("It is damaged or built to exhaust memory (a zip bomb); plumbrule does not read "
        "it. Open it in your spreadsheet and save it again if it is yours.")


def _gib(n: int) -> str:
    return f"{n / 1024 ** 3:.1f} GiB" if n >= 1024 ** 3 else f"{n / 1024 ** 2:.0f} MiB"


def check_members(infos: list[zipfile.ZipInfo], name: str) -> None:
    """Raise :class:`WorkbookError` when the directory entries ``infos`` of the archive
    called ``name`` break a limit of the module doc; return None otherwise."""
    total = 0
    for info in infos:
        size, packed = int(info.file_size), int(info.compress_size)
        total += size
        if size > MAX_PART_BYTES:
            raise WorkbookError(f"'{name}': part '{info.filename}' inflates to {_gib(size)}, "
                                f"more than the {_gib(MAX_PART_BYTES)} a part may have. {_FIX}")
        if size > RATIO_FROM_BYTES and size > MAX_RATIO * max(packed, 1):
            raise WorkbookError(
                f"'{name}': part '{info.filename}' inflates {size // max(packed, 1):,} times "
                f"(to {_gib(size)}); a workbook part above {_gib(RATIO_FROM_BYTES)} may "
                f"inflate at most {MAX_RATIO} times. {_FIX}")
    if total > MAX_TOTAL_BYTES:
        raise WorkbookError(f"'{name}': its parts inflate to {_gib(total)} in all, more than "
                            f"the {_gib(MAX_TOTAL_BYTES)} a workbook may have. {_FIX}")


def check_package(source: str | Path | zipfile.ZipFile) -> None:
    """Check a workbook's zip directory against the limits (see module doc) before anything
    is inflated. ``source``: a path or an open :class:`zipfile.ZipFile`. A file that is not
    a zip archive passes: its reader says what it is."""
    if isinstance(source, zipfile.ZipFile):
        check_members(source.infolist(), Path(source.filename or "workbook").name)
        return
    path = Path(source)
    try:
        with zipfile.ZipFile(path) as z:
            infos = z.infolist()
    except (zipfile.BadZipFile, OSError, ValueError):
        return
    check_members(infos, path.name)

"""One hierarchy of input errors.

Every error a user can cause derives from :class:`PlumbError`. Each carries the
place it refers to (sheet, column, row, setting) and renders as one line that
says where, what was found, and the fix. The surfaces (CLI, worksheet
functions, workbook writer) catch ``PlumbError`` and show ``str(err)``; anything
else is a bug in plumbrule.
"""

from __future__ import annotations


class PlumbError(ValueError):
    """Base of every user-facing error; ``str()`` is the one-line message."""

    def __init__(self, message: str, *, column: str | None = None,
                 row: int | None = None, setting: str | None = None,
                 sheet: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.column = column
        self.row = row
        self.setting = setting
        self.sheet = sheet

    def __str__(self) -> str:  # one line, always
        return " ".join(self.message.split())


class IntakeError(PlumbError):
    """The sheet block itself is malformed (headers, cell contents)."""


class SpecError(PlumbError):
    """The model specification does not fit the data (unknown column, bad log...)."""


class SettingError(PlumbError):
    """A setting has a value outside what it accepts."""


class FitError(PlumbError):
    """The data cannot support the requested fit (rank deficiency, too few rows)."""


class WorkbookError(PlumbError):
    """A workbook cannot be read or safely written."""


def quote_list(names) -> str:
    """'A', 'B' and 'C' — names joined the way the messages use them."""
    names = [f"'{n}'" for n in names]
    if len(names) <= 1:
        return "".join(names)
    return ", ".join(names[:-1]) + " and " + names[-1]

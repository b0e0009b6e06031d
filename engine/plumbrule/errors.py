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


class CellProblem:
    """One cell that cannot be read: sheet row, column header, the cell as quoted, and the
    problem with its fix. ``id`` is the sale's ID when the table has an ID column."""

    __slots__ = ("row", "column", "value", "problem", "id")

    def __init__(self, row: int, column: str, value: str, problem: str,
                 id: str | None = None) -> None:
        self.row, self.column, self.value, self.problem, self.id = (
            int(row), column, value, problem, id)

    def line(self) -> str:
        """'Column 'Price', row 7 (ID Q-104): '$24S,000' is not a number. Enter ...'"""
        who = f" (ID {self.id})" if self.id not in (None, "") else ""
        return f"Column '{self.column}', row {self.row}{who}: {self.value} {self.problem}"

    def record(self) -> dict:
        return {"row": self.row, "id": self.id, "column": self.column, "value": self.value,
                "problem": self.problem}


class CellErrors(IntakeError):
    """Every cell of the used columns that cannot be read, found in one pass.

    ``str()`` is one line: the cell's own message when there is one, else a summary with
    the first cell; :meth:`lines` lists them all (at most ``limit``) for a terminal."""

    def __init__(self, problems: list[CellProblem], prefix: str = "") -> None:
        problems = sorted(problems, key=lambda p: p.row)
        self.problems = problems
        self.prefix = prefix
        first = problems[0]
        if len(problems) == 1:
            message = prefix + first.line()
        else:
            message = (f"{prefix}{len(problems)} cells cannot be read; nothing was written. "
                       f"First: {first.line()}")
        super().__init__(message, column=first.column, row=first.row)

    def summary(self) -> str:
        n = len(self.problems)
        return (f"{self.prefix}{n} cell{'s' if n != 1 else ''} cannot be read; nothing was "
                "written.")

    def lines(self, limit: int = 50) -> list[str]:
        """The summary, one line per cell (at most ``limit``), then a count of the rest."""
        out = [self.summary()] + ["  " + p.line() for p in self.problems[:limit]]
        if len(self.problems) > limit:
            out.append(f"  ... and {len(self.problems) - limit} more")
        return out

    def with_ids(self, ids) -> "CellErrors":
        """The same problems, each with its sale's ID (``ids``: sheet row → ID)."""
        for p in self.problems:
            p.id = None if ids is None else ids.get(p.row)
        return self

    @classmethod
    def joined(cls, errors: list["CellErrors"], prefix: str = "") -> "CellErrors":
        return cls([p for e in errors for p in e.problems], prefix)


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

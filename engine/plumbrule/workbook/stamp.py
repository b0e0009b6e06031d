"""The audit stamp: which plumbrule, when, on which sales, with which settings."""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any, Mapping


@dataclass(frozen=True)
class Stamp:
    """What a reader needs to reproduce a run.

    ``time`` is ISO-8601 UTC text; ``sales_hash`` is the SHA-256 (hex) of the Sales
    table's header and cell values as read; ``settings`` maps setting name → plain value.
    """

    version: str
    time: str
    sales_hash: str
    settings: Mapping[str, Any] = field(default_factory=dict)
    rows_used: int = 0
    rows_set_aside: int = 0
    source: str = ""
    rows_held_out: int = 0

    def local_time(self) -> str:
        """The run's time in this computer's time zone, for reading: '3 December 2026,
        14:07 (UTC+01:00)'; '' without a time."""
        return readable_time(self.time)

    def settings_text(self) -> str:
        """Settings that differ from blank, as 'name=value; …' (one cell)."""
        parts = []
        for k, v in self.settings.items():
            if v is None or (isinstance(v, str) and not v):
                continue
            if isinstance(v, (list, tuple)):
                v = ",".join("=".join(map(str, x)) if isinstance(x, (list, tuple)) else str(x)
                             for x in v)
                if not v:
                    continue
            parts.append(f"{k}={v}")
        return "; ".join(parts)

    def rows(self) -> list[tuple[str, Any]]:
        """(label, value) pairs for writing the stamp into a sheet."""
        return [
            ("plumbrule version", self.version),
            ("Run at (UTC)", self.time),
            ("Run at (local time)", self.local_time()),
            ("Workbook", self.source),
            ("Sales data hash (SHA-256)", self.sales_hash),
            ("Sales used in the fit", self.rows_used),
            ("Sales set aside or dropped", self.rows_set_aside),
            ("Sales held out to test the model", self.rows_held_out),
            ("Settings used", self.settings_text()),
        ]


def make_stamp(analysis, sales_hash: str, source: str = "",
               now: _dt.datetime | None = None) -> Stamp:
    """Stamp for ``analysis``: rows used = rows in the fit that values (with final_fit = all it
    holds the holdout too); set aside = screened and
    dropped (missing values) rows; held out = the holdout (not set aside: it tests the model)."""
    from plumbrule import __version__
    now = now or _dt.datetime.now(_dt.timezone.utc)
    fit = analysis.tables.fit.iloc[0]
    used = int(fit["n_used"])
    total = len(analysis.table.frame)
    held = int(fit["n_holdout"]) if "n_holdout" in fit else 0
    # the validated model's sales: with final_fit = all the model that values also holds the
    # holdout, which is still not set aside
    train = int(fit["n_training"]) if "n_training" in fit else used
    return Stamp(version=__version__, time=now.replace(microsecond=0).isoformat(),
                 sales_hash=sales_hash, settings=analysis.settings.to_dict(),
                 rows_used=used, rows_set_aside=total - train - held, source=source,
                 rows_held_out=held)


def readable_time(iso: str) -> str:
    """ISO-8601 text with its offset → '3 December 2026, 14:07 (UTC+01:00)' in this
    computer's time zone; the text as given when it is not such a time, '' when blank."""
    if not iso:
        return ""
    try:
        t = _dt.datetime.fromisoformat(str(iso))
    except ValueError:
        return str(iso)
    local = t.astimezone() if t.tzinfo is not None else t
    off = local.strftime("%z")
    zone = f" (UTC{off[:3]}:{off[3:]})" if off else ""
    return f"{local.day} {local:%B %Y}, {local:%H:%M}{zone}"

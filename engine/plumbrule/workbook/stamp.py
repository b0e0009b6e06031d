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
            ("Workbook", self.source),
            ("Sales data hash (SHA-256)", self.sales_hash),
            ("Sales used in the fit", self.rows_used),
            ("Sales set aside or dropped", self.rows_set_aside),
            ("Settings used", self.settings_text()),
        ]


def make_stamp(analysis, sales_hash: str, source: str = "",
               now: _dt.datetime | None = None) -> Stamp:
    """Stamp for ``analysis``: rows used = rows in the fit; set aside = screened,
    dropped (missing values) and held-out rows."""
    from plumbrule import __version__
    now = now or _dt.datetime.now(_dt.timezone.utc)
    fit = analysis.tables.fit.iloc[0]
    used = int(fit["n_used"])
    total = len(analysis.table.frame)
    return Stamp(version=__version__, time=now.replace(microsecond=0).isoformat(),
                 sales_hash=sales_hash, settings=analysis.settings.to_dict(),
                 rows_used=used, rows_set_aside=total - used, source=source)

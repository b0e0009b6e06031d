"""Where ``fit`` and ``value`` get their sales, settings, subjects and comparables: a CSV
or a sheet with settings from the flags, or a plumbrule workbook read exactly as ``run``
reads it (its Sales table, Settings sheet, Subjects and Comps), the flags overriding the
sheet."""

from __future__ import annotations

import argparse
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from plumbrule.intake import SheetTable
from plumbrule.settings import REGISTRY, Settings, parse_settings


@dataclass(frozen=True)
class Inputs:
    sales: SheetTable
    settings: Settings
    subjects: SheetTable | None = None
    comps: tuple[int, ...] = ()
    models: tuple = ()          # a plumbrule workbook's Models sheet (compare.Candidate)


def flag_values(args: argparse.Namespace) -> dict[str, Any]:
    """The settings given as flags (name → raw text)."""
    return {name: getattr(args, name) for name in REGISTRY
            if getattr(args, name, None) is not None}


def is_plumbrule_book(path: Path) -> bool:
    """An .xlsx/.xlsm with a Settings sheet beside its Sales (a sheet or an Excel table)."""
    if path.suffix.lower() not in (".xlsx", ".xlsm") or not path.is_file():
        return False
    from python_calamine import CalamineWorkbook
    from plumbrule.intake.zipcheck import check_package
    check_package(path)          # before calamine inflates anything
    try:
        book = CalamineWorkbook.from_path(str(path))
        names = {n.casefold() for n in book.sheet_names}
    except Exception:      # not readable as a workbook: read_table says why, in one line
        return False
    return "settings" in names and ("sales" in names or _has_sales_table(book))


def _has_sales_table(book) -> bool:
    try:
        tables = book.table_names
        tables = tables() if callable(tables) else tables
    except Exception:      # calamine without table support: no table named Sales
        return False
    return any(str(t).casefold() == "sales" for t in tables or ())


def read_inputs(args: argparse.Namespace) -> Inputs:
    """The inputs of ``fit`` / ``value`` from the command line."""
    path = Path(args.data)
    flags = flag_values(args)
    if getattr(args, "sheet", None) is None and is_plumbrule_book(path):
        from plumbrule.workbook.read import read_inputs as read_book
        book = read_book(path)
        raw = {**book.settings, **flags}
        if book.comp_ids and "comps" not in flags and "comp_ids" not in flags:
            raw["comp_ids"] = ",".join(book.comp_ids)
        comps = () if ("comps" in flags or "comp_ids" in flags) else book.comps
        settings = parse_settings(raw)
        if settings.use_model is not None and getattr(args, "command", None) != "compare":
            settings = followed_model(settings, book.models)
        return Inputs(book.sales, settings, book.subjects, tuple(comps), book.models)
    from plumbrule.intake import read_table
    settings = parse_settings(flags)
    return Inputs(read_table(path, sheet=getattr(args, "sheet", None),
                             header_row=settings.header_row,
                             text_columns=settings.text_columns), settings)


def read_models(args: argparse.Namespace, inputs: Inputs) -> tuple:
    """The candidates of ``compare``: the --models file, else the workbook's Models sheet.
    None at all is said, with the fix."""
    from plumbrule.errors import SettingError
    models = getattr(args, "models", None)
    if models:
        from plumbrule.compare import candidates_from_table
        from plumbrule.intake import read_table
        path = Path(models)
        found = candidates_from_table(read_table(path), where=path.name)
        if not found:
            raise SettingError(f"'{path.name}' lists no candidate model. Put one per row: a "
                               "name, then the model settings that differ (e.g. trend).")
        return found
    if not inputs.models:
        raise SettingError("No candidate models to compare. List them on the workbook's Models "
                           "sheet, or give --models MODELS.csv (a name, then the model settings "
                           "that differ, one row per model).")
    return inputs.models


def followed_model(settings: Settings, models: tuple) -> Settings:
    """The settings of the candidate ``use_model`` names (fit and value follow it, as run
    does); an unknown name, or no Models sheet, is an error naming the setting."""
    from plumbrule.compare import candidate_settings, reference_name
    every = candidate_settings(settings, models)
    return every[reference_name(settings, every)]

"""Fixtures the workbook tests share (fixtures only: no test imports from here)."""

import shutil

import pytest


@pytest.fixture(scope="session")
def filled(tmp_path_factory):
    """The demo workbook, filled but not yet analysed (never modified: tests copy it)."""
    from plumbrule.cli.demo import write_demo_book
    return write_demo_book(tmp_path_factory.mktemp("filled"))


@pytest.fixture
def book(filled, tmp_path):
    """A fresh copy of the filled demo workbook, for a test to run on and change."""
    return shutil.copyfile(filled, tmp_path / "book.xlsx")

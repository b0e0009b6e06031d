"""How ``plumbrule run`` replaces the file: the book keeps its permissions and owner, a
read-only book is refused, a symbolic link stays a link and its target is updated, and
no temporary file outlives its run (killed, full disk, two runs at once)."""

from __future__ import annotations

import os
import shutil
from stat import S_IMODE
import subprocess
import sys
import zipfile
from pathlib import Path

import pytest

from workbook_snapshot import folder_state
from plumbrule.cli.main import main


def _sheet_names(path):
    from python_calamine import CalamineWorkbook
    return CalamineWorkbook.from_path(str(path)).sheet_names


def _mode(path):
    return S_IMODE(os.stat(path).st_mode)


def test_a_read_only_book_is_refused_and_stays_read_only(book, capsys):
    os.chmod(book, 0o444)
    before = folder_state(book.parent)
    assert main(["run", str(book)]) == 2
    err = capsys.readouterr().err.strip()
    assert "'book.xlsx' is read-only" in err and "writable" in err and "\n" not in err
    assert folder_state(book.parent) == before and _mode(book) == 0o444


def test_a_private_book_and_its_backup_stay_private(book):
    os.chmod(book, 0o600)
    assert main(["run", str(book)]) == 0
    assert "Model" in _sheet_names(book)
    assert _mode(book) == 0o600
    assert _mode(book.with_name("book.xlsx.bak")) == 0o600


def test_a_shared_book_keeps_its_group_permissions(book):
    os.chmod(book, 0o664)
    old = os.umask(0o077)                 # a strict umask must not narrow the book's mode
    try:
        assert main(["run", str(book), "--no-backup"]) == 0
    finally:
        os.umask(old)
    assert _mode(book) == 0o664


@pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0,
                    reason="giving a file to another owner needs root")
def test_the_owner_of_the_book_is_kept_where_permitted(book):
    os.chown(book, 4321, 4321)
    assert main(["run", str(book)]) == 0
    st = os.stat(book)
    assert (st.st_uid, st.st_gid) == (4321, 4321)
    bak = os.stat(book.with_name("book.xlsx.bak"))
    assert (bak.st_uid, bak.st_gid) == (4321, 4321)


def test_a_symlinked_book_is_written_through_to_its_target(filled, tmp_path):
    shared = tmp_path / "shared"
    shared.mkdir()
    target = shutil.copyfile(filled, shared / "book.xlsx")
    link = tmp_path / "book.xlsx"
    link.symlink_to(target)
    assert main(["run", str(link)]) == 0
    assert link.is_symlink() and Path(os.readlink(link)) == target
    assert "Model" in _sheet_names(target)
    assert sorted(p.name for p in shared.iterdir()) == ["book.xlsx", "book.xlsx.bak"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.xlsx", "shared"]


def test_a_killed_run_leaves_a_temporary_file_that_the_next_run_removes(book):
    # SIGKILL skips every clean-up; the next run removes what a dead plumbrule process left.
    import plumbrule
    engine = os.path.dirname(os.path.dirname(plumbrule.__file__))
    code = ("import os, signal, pathlib\n"
            "from plumbrule.workbook.run import write_atomic\n"
            "def write(tmp):\n"
            "    pathlib.Path(tmp).write_bytes(b'half a book')\n"
            "    os.kill(os.getpid(), signal.SIGKILL)\n"
            f"write_atomic(pathlib.Path({str(book)!r}), write, True)\n")
    done = subprocess.run([sys.executable, "-c", code], env={**os.environ, "PYTHONPATH": engine},
                          capture_output=True, timeout=60)
    assert done.returncode == -9, done.stderr
    left = [p.name for p in book.parent.iterdir() if p.name.startswith(".~plumbrule-")]
    assert len(left) == 1
    assert main(["run", str(book), "--no-backup"]) == 0
    assert sorted(p.name for p in book.parent.iterdir()) == ["book.xlsx"]


def test_temporary_files_of_live_runs_and_other_machines_are_kept(book):
    from plumbrule.workbook.run import _host_tag
    live = book.with_name(f".~plumbrule-{_host_tag()}-{os.getppid()}-0123abcd-book.xlsx")
    other = book.with_name(".~plumbrule-00000000-999999-0123abcd-book.xlsx")
    users = book.with_name(".~plumbrule-notes.txt")
    for p in (live, other, users):
        p.write_bytes(b"x")
    assert main(["run", str(book), "--no-backup"]) == 0
    assert live.exists() and other.exists() and users.exists()


def test_a_full_disk_while_keeping_the_backup_leaves_the_folder_as_it_was(book, monkeypatch,
                                                                          capsys):
    def full(src, dst, *args, **kwargs):
        with open(dst, "wb") as fh:
            fh.write(b"part of a backup")
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(shutil, "copy2", full)
    monkeypatch.setattr(shutil, "copyfile", full)
    before = folder_state(book.parent)
    assert main(["run", str(book)]) == 2
    assert "No space left" in capsys.readouterr().err
    assert folder_state(book.parent) == before


def test_two_overlapping_writes_of_one_book_both_succeed(tmp_path):
    # Two runs on one book at once (here nested in one process, as two threads would be):
    # each has its own temporary files, so neither removes or replaces the other's.
    from plumbrule.workbook.run import write_atomic
    book = tmp_path / "book.xlsx"
    book.write_bytes(b"version 0")

    def inner(tmp):
        Path(tmp).write_bytes(b"version 2")

    def outer(tmp):
        Path(tmp).write_bytes(b"version 1")
        write_atomic(book, inner, True)
    write_atomic(book, outer, True)
    assert book.read_bytes() == b"version 1"
    assert book.with_name("book.xlsx.bak").read_bytes() == b"version 2"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["book.xlsx", "book.xlsx.bak"]


def test_the_updated_book_is_a_valid_zip(book):
    assert main(["run", str(book), "--no-backup"]) == 0
    with zipfile.ZipFile(book) as z:
        assert z.testzip() is None

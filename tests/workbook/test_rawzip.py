"""The raw member copier (workbook/rawzip.py): the copy is a valid zip (zipfile's own CRC
check, testzip), every member reads back to the same bytes, and stored or deflated members
keep their compressed bytes exactly (the point of copying raw)."""

import io
import zipfile

import pytest

from plumbrule.workbook.rawzip import copy_member, raw_bytes


def _source() -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as z:
        z.writestr(zipfile.ZipInfo("[Content_Types].xml"), b"<Types/>" * 50,
                   compress_type=zipfile.ZIP_DEFLATED)
        z.writestr("xl/media/image1.png", bytes(range(256)) * 40, compress_type=zipfile.ZIP_STORED)
        z.writestr("xl/worksheets/sheet1.xml", b"<row>" + b"<c><v>1</v></c>" * 5000 + b"</row>",
                   compress_type=zipfile.ZIP_DEFLATED, compresslevel=9)
        z.writestr("xl/ünïcode name.xml", "é".encode() * 300, compress_type=zipfile.ZIP_DEFLATED)
        z.writestr("empty.bin", b"", compress_type=zipfile.ZIP_DEFLATED)
        z.writestr("xl/other.bin", b"abc" * 1000, compress_type=zipfile.ZIP_BZIP2)
        # a member streamed with a data descriptor (sizes after the data), as some writers do
        with z.open("xl/streamed.xml", "w") as f:
            f.write(b"<streamed/>" * 777)
    return buf.getvalue()


def _unseekable_source() -> bytes:
    """A zip written to a pipe-like stream: every member has a data descriptor (bit 3)."""
    class Pipe(io.RawIOBase):
        def __init__(self):
            self.buf = bytearray()

        def writable(self):
            return True

        def write(self, b):
            self.buf += b
            return len(b)

    pipe = Pipe()
    with zipfile.ZipFile(pipe, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("a.xml", b"<a/>" * 1000)
        z.writestr("b.xml", b"<b/>" * 10)
    return bytes(pipe.buf)


@pytest.mark.parametrize("make", [_source, _unseekable_source])
def test_raw_copy_is_a_valid_zip_with_the_same_members(make):
    src_bytes = make()
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(src_bytes)) as src, zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            target = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
            copy_member(src, info, dst, target)
        dst.writestr("added.xml", b"<new/>")          # ordinary writes still work after it
    with zipfile.ZipFile(io.BytesIO(src_bytes)) as src, zipfile.ZipFile(out) as copy:
        assert copy.testzip() is None                   # zipfile's CRC check of every member
        names = [i.filename for i in src.infolist()]
        assert [i.filename for i in copy.infolist()] == [*names, "added.xml"]
        for info in src.infolist():
            assert copy.read(info.filename) == src.read(info.filename)
            got = copy.getinfo(info.filename)
            if info.compress_type in (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED):
                assert got.compress_type == info.compress_type
                assert raw_bytes(copy, got) == raw_bytes(src, info)   # not recompressed
                assert not got.flag_bits & 0x08          # sizes in the local header
            else:
                assert got.compress_type == zipfile.ZIP_DEFLATED   # bzip2 → deflate
        assert copy.read("added.xml") == b"<new/>"


def test_a_raw_copy_read_by_a_strict_reader():
    # Python's zipfile reads the central directory; the local headers must agree with it
    # too (a reader such as Excel or LibreOffice walks them): check each one by hand.
    import struct
    out = io.BytesIO()
    with zipfile.ZipFile(io.BytesIO(_source())) as src, zipfile.ZipFile(out, "w") as dst:
        for info in src.infolist():
            copy_member(src, info, dst, zipfile.ZipInfo(info.filename))
    data = out.getvalue()
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        for info in z.infolist():
            head = struct.unpack("<4s5H3L2H", data[info.header_offset:info.header_offset + 30])
            assert head[0] == b"PK\x03\x04"
            assert head[6:9] == (info.CRC, info.compress_size, info.file_size)
            name = data[info.header_offset + 30:info.header_offset + 30 + head[9]]
            assert name.decode("utf-8" if info.flag_bits & 0x800 else "cp437") == info.filename

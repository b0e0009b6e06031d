"""Copying a zip member's compressed bytes as they are, into another zip being written.

`plumbrule run` carries every part of the user's book it does not edit byte for byte; a
45 MB Sales sheet decompressed and deflated again is most of the graft's time, for the same
content. zipfile has no public call for a raw copy, so this writes the member's local header
itself (from the source's central-directory record: CRC, sizes, method) followed by the
compressed bytes, and registers the entry with the ZipFile so its central directory lists it.
Only stored and deflated members are copied raw (what a spreadsheet reads); anything else —
another method, an encrypted member — is copied by decompressing, as before.
"""

from __future__ import annotations

import struct
import zipfile
from typing import Any

_LOCAL_HEADER = struct.Struct("<4s5H3L2H")     # zipfile's own layout of a local file header
_RAW_METHODS = (zipfile.ZIP_STORED, zipfile.ZIP_DEFLATED)


def raw_bytes(z: zipfile.ZipFile, info: zipfile.ZipInfo) -> bytes:
    """The compressed bytes of ``info`` in ``z`` (no header, no data descriptor)."""
    fp: Any = z.fp
    fp.seek(info.header_offset)
    head = fp.read(_LOCAL_HEADER.size)
    fields = _LOCAL_HEADER.unpack(head)
    if fields[0] != b"PK\x03\x04":
        raise zipfile.BadZipFile(f"Bad local header of {info.filename!r}")
    name_len, extra_len = fields[9], fields[10]
    fp.seek(info.header_offset + _LOCAL_HEADER.size + name_len + extra_len)
    data = fp.read(info.compress_size)
    if len(data) != info.compress_size:
        raise zipfile.BadZipFile(f"Truncated member {info.filename!r}")
    return data


def copy_member(src: zipfile.ZipFile, info: zipfile.ZipInfo, dst: zipfile.ZipFile,
                target: zipfile.ZipInfo) -> None:
    """Put ``info`` of ``src`` into ``dst`` (open for writing) under ``target``'s name, date
    and attributes, with its compressed bytes unchanged when it is stored or deflated;
    decompressed and written again otherwise."""
    if info.compress_type not in _RAW_METHODS or info.flag_bits & 0x1:
        target.compress_type = zipfile.ZIP_DEFLATED
        dst.writestr(target, src.read(info))
        return
    data = raw_bytes(src, info)
    target.compress_type = info.compress_type
    target.CRC = info.CRC
    target.compress_size = info.compress_size
    target.file_size = info.file_size
    # the sizes and CRC sit in the header written here: no data descriptor follows
    target.flag_bits &= ~0x08
    z: Any = dst                                             # its internals, below
    fp = z.fp
    with z._lock:                                            # zipfile's own write lock
        z._writecheck(target)                                # duplicate names, sizes
        z._didModify = True
        fp.seek(z.start_dir)
        target.header_offset = fp.tell()
        zip64 = target.file_size > zipfile.ZIP64_LIMIT or \
            target.compress_size > zipfile.ZIP64_LIMIT
        fp.write(target.FileHeader(zip64))
        fp.write(data)
        z.filelist.append(target)
        z.NameToInfo[target.filename] = target
        z.start_dir = fp.tell()

"""Arrays as an ordinary `.npz` file that can also be read without copying.

The archive is uncompressed (ZIP_STORED) and each member's data starts on a 64-byte boundary
(padding goes in the local header's extra field, as Android's zipalign does); numpy's `.npy`
header pads itself to 64 bytes too. So `numpy.load` reads the file as any `.npz`, and
`read_npz` returns each array as a view of the mapped file: a review touches a few of a
stored model's arrays and reads only those pages. Arrays of Python objects are refused both
ways: nothing is ever unpickled.
"""
from __future__ import annotations

import io
import mmap
import struct
from collections.abc import Mapping
from typing import Any

import numpy as np

ALIGN = 64
_LOCAL_HEADER = 30  # fixed part of a zip local file header
_PAD_ID = 0xD935  # the extra-field id zipalign uses for padding
_EPOCH = (1980, 1, 1, 0, 0, 0)  # fixed member dates: equal arrays give equal bytes
_STORED = 0  # compression method "stored" in the zip specification


def write_npz(arrays: Mapping[str, np.ndarray], others: Mapping[str, bytes] | None = None) -> bytes:
    """`arrays` as `<name>.npy` members and `others` (e.g. JSON) as members of their own name."""
    import zipfile

    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", zipfile.ZIP_STORED, allowZip64=True) as archive:
        for name, values in arrays.items():
            values = np.ascontiguousarray(values)
            if values.dtype.hasobject:
                raise ValueError(f"array {name} holds Python objects")
            member = io.BytesIO()
            np.lib.format.write_array(member, values, allow_pickle=False)
            _write(archive, out, name + ".npy", member.getvalue())
        for name, raw in (others or {}).items():
            _write(archive, out, name, raw)
    return out.getvalue()


def _write(archive: Any, out: io.BytesIO, name: str, raw: bytes) -> None:
    import zipfile

    info = zipfile.ZipInfo(name, date_time=_EPOCH)
    info.compress_type = zipfile.ZIP_STORED
    start = out.tell() + _LOCAL_HEADER + len(name.encode())
    pad = -(start + 4) % ALIGN  # an extra-field record is 4 bytes of id and length, then data
    info.extra = _PAD_ID.to_bytes(2, "little") + pad.to_bytes(2, "little") + bytes(pad)
    archive.writestr(info, raw)


def read_npz(data: bytes | mmap.mmap) -> tuple[dict[str, np.ndarray], dict[str, bytes]]:
    """(arrays, other members) of `write_npz` output; the arrays are views of `data`.

    Raises ValueError for anything that is not such a file: compressed or misplaced members,
    object arrays, arrays that do not fit their member.
    """
    arrays: dict[str, np.ndarray] = {}
    others: dict[str, bytes] = {}
    for name, method, size, offset in _members(data):
        if method != _STORED:
            raise ValueError(f"member {name} is compressed")
        head = bytes(data[offset:offset + _LOCAL_HEADER])
        if len(head) != _LOCAL_HEADER or head[:4] != b"PK\x03\x04":
            raise ValueError(f"member {name} has no local header")
        start = offset + _LOCAL_HEADER + int.from_bytes(head[26:28], "little") + int.from_bytes(head[28:30], "little")
        end = start + size
        if end > len(data):
            raise ValueError(f"member {name} runs past the end of the file")
        if name.endswith(".npy"):
            arrays[name[:-4]] = _npy_view(data, start, end, name)
        else:
            others[name] = bytes(data[start:end])
    return arrays, others


_END = b"PK\x05\x06"  # end of central directory record
_ENTRY = b"PK\x01\x02"  # central directory file header


def _members(data: bytes | mmap.mmap) -> list[tuple[str, int, int, int]]:
    """(name, compression method, size, local header offset) of each member, read from the
    central directory (the zip specification's records, with `struct`). zipfile is imported
    only for an archive with zip64 records: its import alone took 13 ms of a warm review."""
    tail_start = max(0, len(data) - 22 - 65535)
    at = bytes(data[tail_start:]).rfind(_END)
    if at < 0:
        raise ValueError("not an .npz file (no end of central directory)")
    at += tail_start
    _, _, _, _, count, dir_size, dir_offset, _ = struct.unpack_from("<4sHHHHIIH", data, at)
    if count == 0xFFFF or dir_offset == 0xFFFFFFFF or dir_size == 0xFFFFFFFF:
        return _members_zip64(data)
    out = []
    pos = dir_offset
    for _ in range(count):
        if pos + 46 > len(data) or bytes(data[pos:pos + 4]) != _ENTRY:
            raise ValueError("not an .npz file (damaged central directory)")
        (method, size, name_len, extra_len, comment_len, offset) = (
            struct.unpack_from("<H", data, pos + 10)[0], struct.unpack_from("<I", data, pos + 24)[0],
            *struct.unpack_from("<HHH", data, pos + 28), struct.unpack_from("<I", data, pos + 42)[0])
        name = bytes(data[pos + 46:pos + 46 + name_len]).decode("utf-8", "replace")
        out.append((name, method, size, offset))
        pos += 46 + name_len + extra_len + comment_len
    return out


def _members_zip64(data: bytes | mmap.mmap) -> list[tuple[str, int, int, int]]:
    import zipfile

    source = io.BytesIO(data) if isinstance(data, bytes) else data
    try:
        with zipfile.ZipFile(source) as archive:  # type: ignore[arg-type]
            return [(i.filename, i.compress_type, i.file_size, i.header_offset) for i in archive.infolist()]
    except zipfile.BadZipFile as exc:
        raise ValueError(f"not an .npz file ({exc})") from None


def _npy_view(data: bytes | mmap.mmap, start: int, end: int, name: str) -> np.ndarray:
    # Only the header is copied: magic (6), version (2), header length (2 or 4), header.
    lead = bytes(data[start:min(end, start + 12)])
    width = {1: 2, 2: 4}.get(lead[6] if len(lead) > 6 else 0, 2)
    length = int.from_bytes(lead[8:8 + width], "little")
    header = io.BytesIO(bytes(data[start:min(end, start + 8 + width + length)]))
    version = np.lib.format.read_magic(header)
    if version == (1, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_1_0(header)
    elif version == (2, 0):
        shape, fortran, dtype = np.lib.format.read_array_header_2_0(header)
    else:
        raise ValueError(f"member {name} has .npy version {version}")
    count = int(np.prod(shape, dtype=np.int64))
    offset = start + header.tell()
    if dtype.hasobject or fortran or offset + count * dtype.itemsize > end:
        raise ValueError(f"member {name} does not hold a plain array that fits it")
    return np.frombuffer(data, dtype, count, offset).reshape(shape)

"""The size a netCDF-3 file must have: its header read just far enough to know where every
variable's data end ([NetCDF3]: the classic format CDF-1, 64-bit offset CDF-2, 64-bit data
CDF-5).

The netCDF library returns fill or stale bytes for data past the end of a file cut short, so a
truncated netCDF-3 file reads without error; the size implied by the header is the one way to
tell.  Neither the netCDF library nor xarray exposes the variables' file offsets
(``scipy.io.netcdf_file`` keeps them private and knows no CDF-5), hence this small reader of
the header grammar.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

from obsprep.exceptions import InputFileError

#: bytes of one value of each external type (nc_type tag -> extsize): NC_BYTE, NC_CHAR,
#: NC_SHORT, NC_INT, NC_FLOAT, NC_DOUBLE; CDF-5 adds NC_UBYTE, NC_USHORT, NC_UINT, NC_INT64,
#: NC_UINT64 ([NetCDF3], "Notes on Computing File Offsets" and the CDF-5 types)
_EXTERNAL_SIZE = {1: 1, 2: 1, 3: 2, 4: 4, 5: 4, 6: 8, 7: 1, 8: 2, 9: 4, 10: 8, 11: 8}
_NC_DIMENSION, _NC_VARIABLE, _NC_ATTRIBUTE = 10, 11, 12
CLASSIC_MAGICS = (b"CDF\x01", b"CDF\x02", b"CDF\x05")


class _HeaderCut(Exception):
    """The header itself goes past the end of the file, or is not the grammar's."""


def _padded(n: int) -> int:
    """``n`` rounded up to the next multiple of 4 (the grammar's ``padding``)."""
    return (n + 3) // 4 * 4


class _Header:
    """Sequential reads of the header's big-endian fields, never past the file's end (a
    corrupt count cannot make it read or allocate more than the file holds)."""

    def __init__(self, fh, size: int, version: int):
        self.fh, self.size, self.position = fh, size, 4
        self.count_bytes = 8 if version == 5 else 4     # NON_NEG: INT64 in CDF-5, else INT
        self.offset_bytes = 4 if version == 1 else 8    # OFFSET: INT64 from CDF-2 on

    def read(self, n: int) -> bytes:
        if n < 0 or self.position + n > self.size:
            raise _HeaderCut
        data = self.fh.read(n)
        if len(data) != n:
            raise _HeaderCut
        self.position += n
        return data

    def skip(self, n: int) -> None:
        if n < 0 or self.position + n > self.size:
            raise _HeaderCut
        self.position += n
        self.fh.seek(self.position)

    def integer(self, n: int) -> int:
        return int.from_bytes(self.read(n), "big", signed=True)

    def count(self) -> int:
        value = self.integer(self.count_bytes)
        if value < 0:
            raise _HeaderCut
        return value

    def tag_and_count(self, tag: int, smallest_element: int) -> int:
        """Elements of a list (dim_list, att_list, var_list); 0 when ABSENT."""
        found, n = self.integer(4), self.count()
        if found == 0 and n == 0:
            return 0
        if found != tag or n * smallest_element > self.size - self.position:
            raise _HeaderCut
        return n

    def name(self) -> str:
        return self.read(_padded(self.count())).rstrip(b"\0").decode("utf-8", errors="replace")

    def attributes(self) -> None:
        for _ in range(self.tag_and_count(_NC_ATTRIBUTE, 3 * 4)):
            self.name()
            extsize = _EXTERNAL_SIZE.get(self.integer(4))
            if extsize is None:
                raise _HeaderCut
            self.skip(_padded(self.count() * extsize))


@dataclass(frozen=True)
class ClassicVariable:
    """One variable of a netCDF-3 header: where its data begin and how many bytes it holds
    (per record for a record variable)."""

    name: str
    begin: int
    nbytes: int
    is_record: bool


@dataclass(frozen=True)
class ClassicLayout:
    """What a netCDF-3 header says about the file's data.

    ``numrecs`` is None for a file being streamed (the count is indeterminate, [NetCDF3]
    "Note on streaming data"); ``recsize`` is the bytes of one record of all record variables.
    """

    header_bytes: int
    numrecs: int | None
    recsize: int
    variables: tuple

    def data_end(self, variable: ClassicVariable) -> int:
        """The offset just past the last value of ``variable``: ``begin`` plus its values for
        a non-record variable, ``begin + (numrecs - 1) * recsize`` plus one record's values for a
        record variable ([NetCDF3], "Notes on Computing File Offsets").  Padding after the last
        value is not counted, so a file is never found short by its final padding alone."""
        if not variable.is_record:
            return variable.begin + variable.nbytes
        if not self.numrecs:
            return 0
        return variable.begin + (self.numrecs - 1) * self.recsize + variable.nbytes

    def implied_size(self) -> int:
        """Bytes the file must have to hold the header and every variable's data."""
        return max([self.header_bytes] + [self.data_end(v) for v in self.variables])


def classic_layout(fh, size: int) -> ClassicLayout:
    """Read the header of the open netCDF-3 file ``fh`` (``size`` bytes) into a
    :class:`ClassicLayout`; raises ``_HeaderCut`` when the header is incomplete or corrupt.

    Variable sizes come from the dimension lengths and external types, not from ``vsize``,
    which saturates at 2^32 - 1 for large variables ([NetCDF3], "Note on vsize").
    """
    fh.seek(0)
    magic = fh.read(4)
    if magic not in CLASSIC_MAGICS:
        raise _HeaderCut
    header = _Header(fh, size, magic[3])
    numrecs_field = header.read(header.count_bytes)
    numrecs = None if numrecs_field == b"\xff" * header.count_bytes else int.from_bytes(
        numrecs_field, "big")
    lengths = []
    for _ in range(header.tag_and_count(_NC_DIMENSION, 2 * 4)):
        header.name()
        lengths.append(header.count())
    header.attributes()  # global attributes
    variables = []
    for _ in range(header.tag_and_count(_NC_VARIABLE, 5 * 4)):
        name = header.name()
        dimids = [header.count() for _ in range(header.count())]
        if any(d >= len(lengths) for d in dimids):
            raise _HeaderCut
        header.attributes()
        extsize = _EXTERNAL_SIZE.get(header.integer(4))
        if extsize is None:
            raise _HeaderCut
        header.count()  # vsize: recomputed below
        begin = header.integer(header.offset_bytes)
        shape = [lengths[d] for d in dimids]
        is_record = bool(shape) and shape[0] == 0  # first dimension the record dimension
        values = math.prod(shape[1:] if is_record else shape)
        variables.append(ClassicVariable(name, begin, values * extsize, is_record))
    records = [v for v in variables if v.is_record]
    # one record variable: records are not padded to 4 bytes ([NetCDF3], "Note on padding")
    recsize = (records[0].nbytes if len(records) == 1
               else sum(_padded(v.nbytes) for v in records))
    return ClassicLayout(header.position, numrecs, recsize, tuple(variables))


def check_classic_size(path) -> None:
    """Raise :class:`InputFileError` when the netCDF-3 file ``path`` is shorter than its
    header implies (cut short in transfer, or dimensions declaring more data than the file
    holds); a file of another format passes unchecked.

    The message is one line: "file is truncated: header implies N bytes, file has M", naming
    the first variable whose data are incomplete.
    """
    path = os.fspath(path)
    size = os.path.getsize(path)
    with open(path, "rb") as fh:
        if fh.read(4) not in CLASSIC_MAGICS:
            return
        try:
            layout = classic_layout(fh, size)
        except _HeaderCut:
            raise InputFileError(path, f"file is truncated or corrupt inside its netCDF-3 "
                                       f"header (file has {size} bytes)") from None
    implied = layout.implied_size()
    if implied <= size:
        return
    cut = next((v.name for v in layout.variables if layout.data_end(v) > size), None)
    raise InputFileError(path, f"file is truncated: header implies {implied} bytes, file has "
                               f"{size}", variable=cut)

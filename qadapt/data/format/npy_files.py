"""Reading and writing ``.npy`` files in blocks, with the checks a dataset needs.

Holds:
    NpyHeader -- dtype, shape and data offset of a ``.npy`` file.
    read_npy_header -- parse and check a header; refuses object dtypes and truncated files.
    NpyStreamWriter -- write a ``.npy`` file block by block while hashing it.
    scan_blocks -- read a ``.npy`` file's rows block by block (plain reads, reused buffer),
        feeding every byte to a hash.
    read_rows -- copy rows ``[start, stop)`` of a ``.npy`` file into memory with plain reads.
    RowReader -- an open ``.npy`` file that copies row ranges into a caller's buffer.
"""

from __future__ import annotations

import hashlib
import io
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.lib import format as npy_format

from qadapt.errors import BadInput

DEFAULT_BLOCK_BYTES = 1 << 24  # 16 MiB per block when scanning


@dataclass(frozen=True)
class NpyHeader:
    """What a ``.npy`` header says: element dtype, array shape, byte offset of the data.

    Example:
        >>> h = NpyHeader(np.dtype("float32"), (10, 3), 128)
        >>> h.row_bytes, h.data_bytes
        (12, 120)
    """

    dtype: np.dtype
    shape: tuple[int, ...]
    data_offset: int

    @property
    def row_bytes(self) -> int:
        """Bytes per row (first-axis element)."""
        return int(self.dtype.itemsize * int(np.prod(self.shape[1:], dtype=np.int64)))

    @property
    def data_bytes(self) -> int:
        """Bytes of array data after the header."""
        return int(self.shape[0]) * self.row_bytes if self.shape else self.dtype.itemsize


def read_npy_header(path: Path, *, field: str) -> NpyHeader:
    """Parse the header of the ``.npy`` file at ``path`` without touching its data.

    Raises BadInput (naming the file and ``field``) if the file is missing, is not a ``.npy``
    file, holds Python objects (which could only be read by unpickling; refused), is in
    Fortran order, or is shorter or longer than its header says (a truncated copy).
    """
    where = f"{path} (field {field!r})"
    try:
        handle = open(path, "rb")
    except FileNotFoundError:
        raise BadInput(f"{where}: file is missing") from None
    except OSError as err:
        raise BadInput(f"{where}: cannot open: {err.strerror}") from None
    with handle:
        try:
            major, _minor = npy_format.read_magic(handle)
            if major == 1:
                shape, fortran_order, dtype = npy_format.read_array_header_1_0(handle)
            elif major in (2, 3):
                shape, fortran_order, dtype = npy_format.read_array_header_2_0(handle)
            else:
                raise ValueError(f"unsupported .npy version {major}")
        except (ValueError, OSError, SyntaxError, EOFError) as err:
            raise BadInput(f"{where}: not a readable .npy file ({err})") from None
        data_offset = handle.tell()
    if dtype.hasobject:
        raise BadInput(
            f"{where}: holds Python objects (dtype {dtype}); reading it would mean unpickling, "
            "which is refused. Save plain numeric arrays instead."
        )
    if fortran_order:
        raise BadInput(f"{where}: is stored in Fortran order; save it C-contiguous")
    header = NpyHeader(np.dtype(dtype), tuple(int(n) for n in shape), data_offset)
    actual_size = os.path.getsize(path)
    expected_size = data_offset + header.data_bytes
    if actual_size != expected_size:
        problem = "truncated" if actual_size < expected_size else "longer than its header says"
        raise BadInput(
            f"{where}: file is {problem}: {actual_size} bytes, header of shape {header.shape} "
            f"{header.dtype} implies {expected_size} bytes"
        )
    return header


class NpyStreamWriter:
    """Writes a C-order ``.npy`` file of known shape block by block and hashes every byte.

    Example:
        >>> import tempfile
        >>> p = Path(tempfile.mkdtemp()) / "a.npy"
        >>> w = NpyStreamWriter(p, np.dtype("int64"), (4,))
        >>> w.append(np.arange(2)); w.append(np.arange(2, 4))
        >>> len(w.close())
        64
        >>> np.load(p).tolist()
        [0, 1, 2, 3]
    """

    def __init__(self, path: Path, dtype: np.dtype, shape: tuple[int, ...]) -> None:
        if not shape or shape[0] < 0:
            raise ValueError(f"shape: got {shape}, expected a shape with a first axis")
        self.path = Path(path)
        self.dtype = np.dtype(dtype)
        self.shape = tuple(int(n) for n in shape)
        self._rows_written = 0
        self._hash = hashlib.sha256()
        header = io.BytesIO()
        npy_format.write_array_header_1_0(
            header,
            {
                "descr": npy_format.dtype_to_descr(self.dtype),
                "fortran_order": False,
                "shape": self.shape,
            },
        )
        self._handle = open(self.path, "wb")
        self._handle.write(header.getvalue())
        self._hash.update(header.getvalue())

    def append(self, rows: np.ndarray) -> None:
        """Append ``rows`` (shape ``[n, *shape[1:]]``, cast to the file's dtype)."""
        block = np.ascontiguousarray(rows, dtype=self.dtype)
        if block.shape[1:] != self.shape[1:]:
            raise ValueError(f"{self.path}: rows of shape {block.shape} do not fit {self.shape}")
        if self._rows_written + block.shape[0] > self.shape[0]:
            raise ValueError(f"{self.path}: more rows than the declared {self.shape[0]}")
        if block.size == 0:
            return
        data = memoryview(block).cast("B")
        self._handle.write(data)
        self._hash.update(data)
        self._rows_written += block.shape[0]

    def close(self) -> str:
        """Flush and fsync the file; return its hex SHA-256. All declared rows must be in."""
        if self._rows_written != self.shape[0]:
            self._handle.close()
            raise ValueError(
                f"{self.path}: {self._rows_written} rows written, {self.shape[0]} declared"
            )
        self._handle.flush()
        os.fsync(self._handle.fileno())
        self._handle.close()
        return self._hash.hexdigest()

    def abandon(self) -> None:
        """Close without the row-count check (the caller discards the file)."""
        self._handle.close()


def scan_blocks(
    path: Path, header: NpyHeader, digest, *, block_bytes: int = DEFAULT_BLOCK_BYTES
) -> Iterator[tuple[int, np.ndarray]]:
    """Yield ``(first_row, rows)`` blocks of the file, feeding every byte read to ``digest``.

    The yielded array is a view of a buffer that is reused for the next block: use it before
    asking for the next one. Plain reads are used (no memory map), so scanning a file does not
    raise the process's resident memory by the file's size.
    """
    rows_per_block = max(1, block_bytes // max(header.row_bytes, 1))
    row_shape = header.shape[1:]
    buffer = np.empty((rows_per_block, *row_shape), dtype=header.dtype)
    raw = memoryview(buffer).cast("B")
    total_rows = header.shape[0]
    with open(path, "rb") as handle:
        digest.update(handle.read(header.data_offset))
        first = 0
        while first < total_rows:
            count = min(rows_per_block, total_rows - first)
            want = count * header.row_bytes
            got = handle.readinto(raw[:want])
            if got != want:
                raise BadInput(f"{path}: file shrank while being read (truncated copy?)")
            digest.update(raw[:want])
            yield first, buffer[:count]
            first += count
        if handle.read(1):
            raise BadInput(f"{path}: file grew while being read")


def read_rows(path: Path, header: NpyHeader, start: int, stop: int) -> np.ndarray:
    """Rows ``[start, stop)`` of the ``.npy`` file, copied into memory with plain reads."""
    if not 0 <= start <= stop <= header.shape[0]:
        raise ValueError(f"rows [{start}, {stop}) outside [0, {header.shape[0]})")
    out = np.empty((stop - start, *header.shape[1:]), dtype=header.dtype)
    if out.size == 0:
        return out
    with open(path, "rb") as handle:
        handle.seek(header.data_offset + start * header.row_bytes)
        want = (stop - start) * header.row_bytes
        if handle.readinto(memoryview(out).cast("B")) != want:
            raise BadInput(f"{path}: file shrank while being read (truncated copy?)")
    return out


class RowReader:
    """Copies row ranges of one ``.npy`` file into caller-provided buffers (``os.preadv``).

    Plain reads go through the page cache without mapping it into the process, so repeated
    reads do not raise the process's resident size.

    Example:
        >>> import tempfile
        >>> p = Path(tempfile.mkdtemp()) / "a.npy"
        >>> np.save(p, np.arange(10, dtype=np.int64))
        >>> reader = RowReader(p, read_npy_header(p, field="a"))
        >>> buffer = np.empty(3, np.int64)
        >>> reader.read_into(4, buffer).tolist()
        [4, 5, 6]
        >>> reader.close()
    """

    def __init__(self, path: Path, header: NpyHeader) -> None:
        self.path = Path(path)
        self.header = header
        self._descriptor = os.open(self.path, os.O_RDONLY)

    def read_into(self, start: int, out: np.ndarray) -> np.ndarray:
        """Fill ``out`` (C-contiguous, the file's dtype, ``[n, *row_shape]``) with rows
        ``[start, start + n)``; return ``out``."""
        count = out.shape[0]
        if not 0 <= start <= start + count <= self.header.shape[0]:
            raise ValueError(f"rows [{start}, {start + count}) outside [0, {self.header.shape[0]})")
        if count == 0:
            return out
        want = count * self.header.row_bytes
        got = os.preadv(
            self._descriptor,
            [memoryview(out).cast("B")],
            self.header.data_offset + start * self.header.row_bytes,
        )
        if got != want:
            raise BadInput(f"{self.path}: file shrank while being read (truncated copy?)")
        return out

    def close(self) -> None:
        if self._descriptor >= 0:
            os.close(self._descriptor)
            self._descriptor = -1

    def __del__(self) -> None:
        self.close()

"""What the arrays of a ``.npz`` declare, checked before any of them is loaded.

A ``.npz`` is a zip archive of ``.npy`` files; each begins with a small header
giving the array's dtype and shape (NumPy's ``.npy`` format, read here with
``numpy.lib.format.read_magic`` and ``read_array_header_1_0/2_0``, which
parse the header only). A hostile or damaged file can declare a shape of
petabytes, a dtype that does not parse, or a negative size; loading it would
end in ``MemoryError`` or a parser's traceback. :func:`check_declared` reads
only the headers, holds them to the limits below and to the bytes actually in
the archive, and names the array and the rule broken.
"""

from __future__ import annotations

import tokenize
import zipfile
from dataclasses import dataclass

import numpy as np
from numpy.lib import format as npy_format

from tinyconv.errors import DataError

#: Largest image array accepted, in bytes (4 GiB): far beyond any data set a
#: microcontroller classifier is searched on, and within what a workstation holds.
MAX_IMAGE_BYTES = 1 << 32
#: Largest image side accepted, in pixels: inputs are resized to tens of pixels.
MAX_SIDE = 4096
#: Longest class name accepted, in characters.
MAX_NAME_CHARS = 256
_SAVE_HINT = "save it with np.savez(path, x=images, y=labels)"
# What a header that does not parse raises (numpy evaluates it as a Python literal).
_HEADER_FAULTS = (ValueError, SyntaxError, TypeError, tokenize.TokenError, EOFError,
                  OSError, zipfile.BadZipFile)


@dataclass(frozen=True)
class Declared:
    """One array's header: ``shape``, ``dtype`` and the bytes its file holds after
    the header (``available``)."""

    name: str
    shape: tuple[int, ...]
    dtype: np.dtype
    available: int

    @property
    def nbytes(self) -> int:
        return int(np.prod(self.shape, dtype=object)) * self.dtype.itemsize


def read_declared(archive: zipfile.ZipFile, name: str, where: str) -> Declared:
    """The header of array ``name`` (member ``name.npy``) without loading the array."""
    member = archive.getinfo(f"{name}.npy")
    try:
        with archive.open(member) as fh:
            version = npy_format.read_magic(fh)
            if version == (1, 0):
                shape, _fortran, dtype = npy_format.read_array_header_1_0(fh)
            elif version == (2, 0):
                shape, _fortran, dtype = npy_format.read_array_header_2_0(fh)
            else:
                raise ValueError(f".npy format version {version[0]}.{version[1]} (structured "
                                 "arrays with non-Latin names), which holds no image data")
            header = fh.tell()
    except _HEADER_FAULTS as exc:
        raise DataError(f"{where}: the header of array {name!r} cannot be read "
                        f"({type(exc).__name__}: {exc}); the file is damaged or was not "
                        f"written by NumPy; {_SAVE_HINT}") from None
    return Declared(name, tuple(shape), dtype, member.file_size - header)


def check_declared(archive: zipfile.ZipFile, where: str) -> dict[str, Declared]:
    """Check the headers of ``x``, ``y`` and ``classes`` (when present).

    Returns
    -------
    dict of array name to :class:`Declared`, for the arrays present.

    Raises
    ------
    DataError
        A header that cannot be read, a dtype that holds no numbers (objects,
        records) or no text for ``classes``, a negative size, images larger
        than :data:`MAX_SIDE` a side or :data:`MAX_IMAGE_BYTES` in all, class
        names longer than :data:`MAX_NAME_CHARS`, or an array declaring more
        bytes than its file holds.
    """
    present = {n[:-4] for n in archive.namelist() if n.endswith(".npy")}
    found = {n: read_declared(archive, n, where) for n in ("x", "y", "classes") if n in present}
    for d in found.values():
        if d.dtype.hasobject or d.dtype.fields is not None:
            raise DataError(f"{where}: array {d.name!r} has dtype {d.dtype}, which holds "
                            "Python objects or records, not numbers (object arrays are never "
                            f"read: no pickle); store numeric x and y and string classes")
        if any(s < 0 for s in d.shape):
            raise DataError(f"{where}: array {d.name!r} declares the shape {d.shape}, with a "
                            f"negative size; the file is damaged; {_SAVE_HINT}")
    x, names = found.get("x"), found.get("classes")
    if x is not None:
        if x.dtype.kind not in "uif":
            raise DataError(f"{where}: array 'x' has dtype {x.dtype}; store uint8 (0..255) "
                            "or float in [0, 1]")
        if len(x.shape) in (3, 4) and max(x.shape[1:3]) > MAX_SIDE:
            raise DataError(f"{where}: array 'x' declares images of {x.shape[1]} x "
                            f"{x.shape[2]} pixels, more than the limit of {MAX_SIDE} pixels "
                            "a side; resize them first (the networks take small inputs)")
        if x.nbytes > MAX_IMAGE_BYTES:
            raise DataError(f"{where}: array 'x' declares the shape {x.shape} of {x.dtype}, "
                            f"{x.nbytes:,} bytes, more than the limit of {MAX_IMAGE_BYTES:,} "
                            "bytes of images; use fewer or smaller images, or uint8 pixels")
    if names is not None and names.dtype.kind in "US" and \
            names.dtype.itemsize // (4 if names.dtype.kind == "U" else 1) > MAX_NAME_CHARS:
        raise DataError(f"{where}: array 'classes' holds names of up to "
                        f"{names.dtype.itemsize // (4 if names.dtype.kind == 'U' else 1):,} "
                        f"characters, more than the limit of {MAX_NAME_CHARS}; shorten them")
    for d in found.values():
        if d.nbytes > d.available:
            raise DataError(f"{where}: array {d.name!r} declares the shape {d.shape} of "
                            f"{d.dtype} ({d.nbytes:,} bytes), but its file in the archive "
                            f"holds only {d.available:,} bytes; the file is damaged or cut "
                            f"short; {_SAVE_HINT}")
    return found

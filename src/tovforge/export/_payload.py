"""The checksums of an exported file: its numbers (the model's arrays as a checksummed base64 zlib stream of
.npy records, bytes shuffled) and the file as a whole (:func:`seal`).

The payload checksum (``PAYLOAD_SHA256``) says the numbers are those
exported; the file checksum (the last line, ``FILE_SHA256``) covers every
other line, code and constants included, so that an accidental edit anywhere
(a constant changed, a line deleted) is refused at import.  Neither guards
against someone who edits a check along with what it checks: they are not
signatures.
"""

from __future__ import annotations

import base64
import hashlib
import io
import zlib
from dataclasses import dataclass

import numpy as np

from ._render import ExportError, identifier

__all__ = ["Payload", "pack", "seal", "FILE_SHA256_PREFIX"]

_LINE = 1000  # characters of base64 per source line (each line costs 7 characters of quotes and indent)


@dataclass(frozen=True)
class Payload:
    """A model's arrays, packed.

    Attributes
    ----------
    raw : bytes
        The zlib stream of ``.npy`` records, in sorted name order.
    index : list of (str, str, tuple, str)
        Name, dtype string, shape and memory order (``"C"`` or ``"F"``) of each
        array, in stream order.
    sha256 : str
        SHA-256 of ``raw`` (the exported file checks it before reading).
    """

    raw: bytes
    index: list
    sha256: str

    def lines(self) -> list[str]:
        """The base64 text of ``raw``, cut into source lines."""
        b64 = base64.b64encode(self.raw).decode("ascii")
        return [b64[i:i + _LINE] for i in range(0, len(b64), _LINE)]


def pack(arrays: dict) -> Payload:
    """The arrays as ``.npy`` records of shuffled bytes (sorted names, memory order kept, little-endian), compressed.

    Each array's bytes are stored shuffled: the first byte of every number,
    then the second, ... (a ``(itemsize, count)`` uint8 record; the shuffle
    filter of HDF5 and Blosc, common practice).  Exponents and high mantissa
    bytes of neighbouring numbers repeat, so zlib finds them: the demo models'
    payloads shrink by 8 % (2.51 -> 2.30 MB), at the same numbers bit for bit.
    """
    buf = io.BytesIO()
    index = []
    for name in sorted(arrays):
        a = np.asarray(arrays[name])
        if a.dtype.kind not in "fiu" or a.dtype.hasobject:
            raise ExportError(f"model array {name!r} has dtype {a.dtype}; only numbers are exported.")
        # keep the memory order (C or Fortran): BLAS sums in an order that follows the layout, and
        # ill-conditioned GP weights turn that into differences of 1e-7
        order = "F" if a.ndim > 1 and a.flags.f_contiguous and not a.flags.c_contiguous else "C"
        a = a.astype(a.dtype.newbyteorder("<"), copy=False)
        size = a.dtype.itemsize
        shuffled = np.frombuffer(a.tobytes(order=order), dtype=np.uint8).reshape(-1, size).T
        np.lib.format.write_array(buf, np.ascontiguousarray(shuffled), allow_pickle=False)
        index.append((identifier(name, "model array name"), a.dtype.str, tuple(int(s) for s in a.shape), order))
    raw = zlib.compress(buf.getvalue(), 9)
    return Payload(raw=raw, index=index, sha256=hashlib.sha256(raw).hexdigest())


#: How the last line of an exported file starts; the interface code finds it there at import.
FILE_SHA256_PREFIX = "FILE_SHA256 = "


def seal(text: str) -> str:
    """``text`` with a last line recording the SHA-256 of everything before it (UTF-8, ``\\n`` line ends).

    The exported file checks it when imported (``_check_file`` of
    :mod:`tovforge.export._evaluator`): the file's bytes without that line,
    with ``\\r\\n`` read as ``\\n``, must hash to the recorded value.
    """
    if not text.endswith("\n"):
        text += "\n"
    if any(line.startswith(FILE_SHA256_PREFIX) for line in text.splitlines()):
        raise ExportError(f"internal: the file already has a {FILE_SHA256_PREFIX.strip()} line.")
    digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
    return text + f'{FILE_SHA256_PREFIX}"{digest}"  # sha256 of every other line of this file, checked at import\n'

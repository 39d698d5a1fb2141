"""Standalone evaluators: each trained surrogate as one Python file that needs NumPy only.

:func:`export_model` writes the file: a header a person can read (model,
provenance, held-out error table, payload checksum), the prediction runtime,
the query contract and the interface code copied verbatim from this package,
and the model's numbers as a checksummed base64 payload of ``.npy`` arrays
(never a pickle).
"""

from __future__ import annotations

from ._export import NAMESPACES, ExportResult, export_model
from ._render import ExportError

__all__ = ["export_model", "ExportResult", "ExportError", "NAMESPACES"]

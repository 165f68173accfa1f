"""SHA-256 of input and output files, for provenance records."""

from __future__ import annotations

import hashlib

__all__ = ["file_sha256"]


def file_sha256(path) -> str:
    """SHA-256 of a file, hex."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()

"""sha256 checksums of files and of directories (Zarr stores)."""

from __future__ import annotations

import hashlib
from pathlib import Path

__all__ = ["sha256_file", "sha256_tree"]


def sha256_file(path) -> str:
    """sha256 of a file's bytes, hex.

    Examples
    --------
    >>> import tempfile
    >>> p = Path(tempfile.mkdtemp()) / "a"; _ = p.write_bytes(b"abc")
    >>> sha256_file(p)[:16]  # FIPS 180-2 test vector for "abc"
    'ba7816bf8f01cfea'
    """
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def sha256_tree(path) -> str:
    """sha256 of a directory: its files' relative paths and checksums, in sorted order
    (a file gives its own checksum).

    Examples
    --------
    >>> import tempfile
    >>> d = Path(tempfile.mkdtemp()); _ = (d / "a").write_text("x")
    >>> sha256_tree(d) == sha256_tree(d)
    True
    """
    path = Path(path)
    if path.is_file():
        return sha256_file(path)
    h = hashlib.sha256()
    for f in sorted(p for p in path.rglob("*") if p.is_file()):
        h.update(f.relative_to(path).as_posix().encode() + b"\0")
        h.update(sha256_file(f).encode())
    return h.hexdigest()

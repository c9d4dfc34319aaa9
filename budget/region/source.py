"""Where region data comes from: a file on disk, or data in memory (bytes, a stream, a parsed
GeoJSON object, JSON text) with the file name to show in messages."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class Source:
    """One region source.  ``path`` for a file on disk, else ``data``; ``shown`` is the file
    name used in messages (an upload's name; None for text or objects handed over in code)."""

    path: Path | None = None
    data: Any = None
    shown: str | None = None

    @property
    def where(self) -> str:
        """" in 'basins.zip'" (or "") to append to messages."""
        return f" in '{self.shown}'" if self.shown else ""

    @property
    def stem(self) -> str | None:
        return Path(self.shown).stem if self.shown else None

    @property
    def suffix(self) -> str:
        return Path(self.shown).suffix.lower() if self.shown else ""

    @property
    def is_stream(self) -> bool:
        return hasattr(self.data, "read")

    def read_bytes(self) -> bytes:
        """The whole content of an in-memory source (bytes or a binary stream)."""
        if self.is_stream:
            return bytes(self.data.read())
        return bytes(self.data)

    def head(self, n: int = 8) -> bytes:
        """The first ``n`` bytes of a byte source (b"" for objects and text), to sniff its type."""
        if isinstance(self.data, (bytes, bytearray, memoryview)):
            return bytes(self.data[:n])
        if self.is_stream and hasattr(self.data, "seek") and hasattr(self.data, "tell"):
            pos = self.data.tell()
            first = self.data.read(n)
            self.data.seek(pos)
            return bytes(first)
        return b""


def as_source(obj, filename: str | None = None) -> Source:
    """A :class:`Source` from a path, a parsed GeoJSON object, JSON text, bytes or a binary
    stream; ``filename`` names in-memory data (an upload) and decides its type."""
    if isinstance(obj, Source):
        return obj
    if filename is not None:
        return Source(data=obj, shown=Path(str(filename)).name)
    if isinstance(obj, (dict, list, bytes, bytearray, memoryview)) or hasattr(obj, "read"):
        return Source(data=obj)
    if isinstance(obj, str) and obj.lstrip().startswith(("{", "[")):
        return Source(data=obj)
    if isinstance(obj, (str, os.PathLike)):
        path = Path(obj)
        return Source(path=path, shown=path.name)
    return Source(data=obj)

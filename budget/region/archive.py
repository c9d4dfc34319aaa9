"""Reading shapefile members within a size budget: from a .zip (path, bytes or stream) or
from files on disk.

The budget is on the EXPANDED size: the sum of the members' declared sizes is checked before
anything is read, and the bytes really read are counted while each member streams in, so an
archive whose headers understate its content is stopped as well.  Members are read straight
from the archive in memory; nothing is written to disk.
"""

from __future__ import annotations

import io
import zipfile
from pathlib import Path

from ..errors import RegionError
from .source import Source

#: Most bytes one shapefile (.shp, .shx, .dbf and .prj together) may expand to when read from
#: a file given on the command line or in code.
SHAPEFILE_LIMIT_BYTES = 256 * 2**20
#: The same for an upload to the dashboard, where the server's memory is shared.
UPLOAD_EXPANDED_LIMIT_BYTES = 32 * 2**20

SIDECARS = ("shx", "dbf", "prj")
_CHUNK = 1 << 20


def too_large(shown: str, size: int, limit: int) -> RegionError:
    return RegionError(
        f"The shapefile in '{shown}' expands to {_mb(size)}, more than the {_mb(limit)} "
        "allowed for a region; simplify the outline (fewer vertices) or keep only the basins "
        "you need."
    )


def _mb(n: int) -> str:
    return f"{n / 2**20:.1f} MB" if n < 10 * 2**20 else f"{n / 2**20:,.0f} MB"


def read_capped(stream, left: int, shown: str, limit: int) -> bytes:
    """Read ``stream`` in chunks; more than ``left`` bytes is refused (``limit`` for messages)."""
    buf = io.BytesIO()
    while True:
        chunk = stream.read(_CHUNK)
        if not chunk:
            return buf.getvalue()
        if buf.tell() + len(chunk) > left:
            raise too_large(shown, limit - left + buf.tell() + len(chunk), limit)
        buf.write(chunk)


def files_from_disk(path: Path, limit: int) -> dict[str, bytes]:
    """A .shp and the sidecar files beside it (any case of suffix), within ``limit`` bytes."""
    found = {"shp": path}
    for ext in SIDECARS:
        for cand in (path.with_suffix("." + ext), path.with_suffix("." + ext.upper())):
            if cand.exists():
                found[ext] = cand
                break
    total = sum(p.stat().st_size for p in found.values())
    if total > limit:
        raise too_large(path.name, total, limit)
    files, left = {}, limit
    for ext, p in found.items():
        with open(p, "rb") as fh:
            files[ext] = read_capped(fh, left, path.name, limit)
        left -= len(files[ext])
    return files


def files_from_zip(src: Source, limit: int) -> dict[str, bytes]:
    """The members of the one shapefile a .zip holds, streamed within ``limit`` bytes."""
    shown = src.shown or "the uploaded archive"
    try:
        if src.path is not None:
            zf = zipfile.ZipFile(src.path)
        elif src.is_stream:
            zf = zipfile.ZipFile(src.data)
        else:
            zf = zipfile.ZipFile(io.BytesIO(bytes(src.data)))
    except (zipfile.BadZipFile, EOFError, ValueError):
        raise RegionError(
            f"The file '{shown}' is not a valid .zip archive; zip the shapefile again."
        ) from None
    with zf:
        members = _shapefile_members(zf, shown)
        total = sum(info.file_size for info in members.values())
        if total > limit:
            raise too_large(shown, total, limit)
        files, left = {}, limit
        for ext, info in members.items():
            try:
                with zf.open(info) as stream:
                    files[ext] = read_capped(stream, left, shown, limit)
            except (zipfile.BadZipFile, EOFError, NotImplementedError, RuntimeError) as exc:
                raise RegionError(
                    f"The member '{info.filename}' of '{shown}' cannot be read ({exc}); zip the "
                    "shapefile again without a password, with ordinary (deflate) compression."
                ) from None
            left -= len(files[ext])
    return files


def _shapefile_members(zf: zipfile.ZipFile, shown: str) -> dict[str, zipfile.ZipInfo]:
    infos = [i for i in zf.infolist()
             if not i.filename.startswith("__MACOSX") and not i.is_dir()]
    shps = [i for i in infos if i.filename.lower().endswith(".shp")]
    if not shps:
        raise RegionError(
            f"The archive '{shown}' holds no .shp file; zip the .shp, .shx, .dbf (and .prj) "
            "files of one shapefile."
        )
    if len(shps) > 1:
        names = ", ".join(i.filename for i in shps[:5])
        raise RegionError(
            f"The archive '{shown}' holds {len(shps)} shapefiles ({names}); zip only one."
        )
    base = shps[0].filename[:-4]
    members = {"shp": shps[0]}
    for i in infos:
        n = i.filename
        if n[:-4] == base and n[-4:].lower() in tuple("." + e for e in SIDECARS):
            members[n[-3:].lower()] = i
    return members

"""Never a lost file: the one atomic writer and the output transaction of a run.

`atomic_write(path, data)` writes bytes or text to a temporary file beside the target
(flushed and fsync'ed), gives it the usual permissions (0666 minus the umask, so 0644 under
umask 022) and renames it into place: a reader sees the old file or the complete new one.

`Outputs` is the transaction of one run. Every output is *planned* before anything is computed
(`file`, `folder`), which checks, with one sentence naming the path and the fix:

* an output that is one of the inputs (or inside an input folder) is refused whatever the flags;
* an existing file is refused without `overwrite`; a folder where a file is expected is refused;
* the folder must exist (or be planned) and be writable; two outputs may not share a path.

Outputs are then *staged* (written to temporaries beside their targets as they become ready)
and *committed* together at the end, with Ctrl-C and SIGTERM held off during the renames.
Leaving the transaction without a commit (an error, Ctrl-C, SIGTERM turned into an exception)
removes every temporary and every folder it created that is still empty. A temporary left by a
killed process (its name carries the process id) is removed when a later run plans the same
target.
"""

from __future__ import annotations

import errno
import glob
import os
import re
import signal
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterable

from .errors import RequestError

__all__ = ["atomic_write", "Outputs", "file_mode", "is_input"]

_TMP_SUFFIX = ".tmp"
_FULL = (errno.ENOSPC, errno.EDQUOT, errno.EFBIG)
_READ_ONLY = (errno.EROFS, errno.EACCES, errno.EPERM)


def _umask() -> int:
    try:  # Linux: read it without changing it (changing it is not thread-safe)
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    old = os.umask(0o022)
    os.umask(old)
    return old


def file_mode() -> int:
    """The mode a new file gets from open(): 0666 minus the umask (0644 under umask 022)."""
    return 0o666 & ~_umask()


def _tmp_prefix(target: Path) -> str:
    return f".{target.name}.{os.getpid()}-"


def _one_of(suffixes) -> str:
    s = list(suffixes)
    return s[0] if len(s) == 1 else f"{', '.join(s[:-1])} or {s[-1]}"


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def clean_stale(target: Path) -> list[Path]:
    """Remove temporaries of `target` left by processes that no longer run (SIGKILL, power cut)."""
    removed = []
    pat = re.compile(re.escape(f".{target.name}.") + r"(\d+)-[^/]*" + re.escape(_TMP_SUFFIX)
                     + "(" + re.escape(target.suffix) + ")?$")
    for f in glob.glob(os.path.join(glob.escape(str(target.parent)), f".{glob.escape(target.name)}.*{_TMP_SUFFIX}*")):
        m = pat.match(os.path.basename(f))
        if m and int(m.group(1)) != os.getpid() and not _pid_alive(int(m.group(1))):
            try:
                os.unlink(f)
                removed.append(Path(f))
            except OSError:
                pass
    return removed


def _os_error(exc: OSError, target: Path, flag: str) -> RequestError:
    """One sentence for a failed write: disk full, read-only folder, or the system's reason."""
    folder = str(target.parent)
    if exc.errno in _FULL:
        return RequestError(f"The disk is full while writing {str(target)!r} (no space left in {folder!r}); "
                            f"free some space or choose another {flag} folder. Nothing was written.")
    if exc.errno in _READ_ONLY:
        return RequestError(f"Cannot write into the folder {folder!r} (it is read-only or not yours); "
                            f"choose another {flag} folder. Nothing was written.")
    return RequestError(f"Cannot write {str(target)!r} ({exc.strerror or exc}); choose another {flag} path. "
                        "Nothing was written.")


def _write_temp(target: Path, data, flag: str = "--out", keep_suffix: bool = False) -> Path:
    """The data in a complete, fsync'ed temporary file beside `target`, with the usual mode.

    `data` is bytes, text (written as UTF-8) or a function that writes a file at the path it
    is given (for writers that need a path, such as a NetCDF library). `keep_suffix` ends the
    temporary's name in the target's extension too (.tmp.png), for writers that read the format
    from the name.
    """
    suffix = _TMP_SUFFIX + (target.suffix if keep_suffix else "")
    try:
        fd, tmp = tempfile.mkstemp(prefix=_tmp_prefix(target), suffix=suffix, dir=target.parent)
    except OSError as exc:
        raise _os_error(exc, target, flag) from None
    try:
        if callable(data):
            os.close(fd)
            data(Path(tmp))
            fd = os.open(tmp, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        else:
            payload = data.encode("utf-8") if isinstance(data, str) else bytes(data)
            with os.fdopen(fd, "wb") as fh:
                fh.write(payload)
                fh.flush()
                os.fsync(fh.fileno())
        os.chmod(tmp, file_mode())  # mkstemp makes the file private (0600)
    except BaseException as exc:
        _unlink(tmp)
        if isinstance(exc, OSError):
            raise _os_error(exc, target, flag) from None
        raise
    return Path(tmp)


def _unlink(path) -> None:
    try:
        os.unlink(path)
    except FileNotFoundError:
        pass


def _fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _place(tmp: Path, target: Path, overwrite: bool) -> None:
    """Rename the temporary into place; without `overwrite` never replace a file that appeared."""
    if overwrite:
        os.replace(tmp, target)
        return
    try:
        os.link(tmp, target)  # fails if the target exists: no clobbering, even in a race
    except FileExistsError:
        raise RequestError(f"{str(target)!r} appeared while this run was computing; it was left as it is. "
                           "Choose another output path or pass --overwrite.") from None
    except OSError:  # a file system without hard links
        if target.exists():
            raise RequestError(f"{str(target)!r} appeared while this run was computing; it was left as it is. "
                               "Choose another output path or pass --overwrite.") from None
        os.replace(tmp, target)
        return
    _unlink(tmp)


def atomic_write(path, data, overwrite: bool = True, flag: str = "--out", keep_suffix: bool = False) -> Path:
    """Write `data` to `path` atomically; returns the path.

    `data`: bytes, text (UTF-8), or a function writing a file at the temporary path it is given.
    `flag` names the option a user changes to write elsewhere (in the error sentences);
    `keep_suffix` keeps the target's extension on the temporary (see `_write_temp`).
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise RequestError(f"The output folder {str(folder)!r} does not exist; create it or choose another path.")
    if target.is_dir():
        raise RequestError(f"{str(target)!r} is a folder; give a file name.")
    if target.exists() and not overwrite:
        raise RequestError(f"{str(target)!r} exists already; choose another path or pass --overwrite.")
    tmp = _write_temp(target, data, flag, keep_suffix)
    try:
        _place(tmp, target, overwrite)
    except BaseException:
        _unlink(tmp)
        raise
    _fsync_dir(folder)
    return target


def _expand(inputs: Iterable) -> list[Path]:
    out = []
    for item in inputs:
        if item is None:
            continue
        s = str(item)
        matches = glob.glob(s) if glob.has_magic(s) else [s]
        out.extend(Path(m) for m in matches)
    return out


def _same(a: Path, b: Path) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.abspath(a) == os.path.abspath(b)


def is_input(path: Path, inputs: Iterable[Path]) -> Path | None:
    """The input that `path` is (or lies inside, for a folder input such as a Zarr store)."""
    real = Path(os.path.realpath(path))
    for inp in inputs:
        if _same(path, inp):
            return inp
        rin = Path(os.path.realpath(inp))
        if rin.is_dir() and (real == rin or rin in real.parents):
            return inp
    return None


@contextmanager
def _signals_held():
    """Hold off Ctrl-C and SIGTERM while the outputs are renamed, so they land together."""
    held = {signal.SIGINT, signal.SIGTERM}
    try:
        old = signal.pthread_sigmask(signal.SIG_BLOCK, held)
    except (AttributeError, ValueError, OSError):  # not available, or not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


class Outputs:
    """The outputs of one run: planned and checked first, committed together at the end."""

    def __init__(self, inputs: Iterable = (), overwrite: bool = False):
        self.inputs = _expand(inputs)
        self.overwrite = bool(overwrite)
        self.planned: dict[Path, str] = {}  # target -> flag that named it
        self.staged: list[tuple[Path, Path]] = []  # (temporary, target), in order
        self.folders: list[Path] = []  # planned output folders
        self.created: list[Path] = []  # folders this run created (removed again if left empty)
        self.committed = False

    # -- planning (before computing) ---------------------------------------------------------
    def input_hit(self, path) -> Path | None:
        """The input that `path` is or lies inside, if any."""
        return is_input(Path(path), self.inputs)

    def _refuse_input(self, path: Path, flag: str) -> None:
        hit = is_input(path, self.inputs)
        if hit is not None:
            raise RequestError(f"{flag} {str(path)!r} is one of the inputs ({str(hit)!r}); an input is never "
                               "overwritten, whatever the flags: choose another output path.")

    def _writable(self, folder: Path, flag: str) -> None:
        probe = folder
        while not probe.exists() and probe != probe.parent:
            probe = probe.parent
        try:
            fd, tmp = tempfile.mkstemp(prefix=f".fluxfence-probe.{os.getpid()}-", suffix=_TMP_SUFFIX, dir=probe)
        except OSError as exc:
            if exc.errno in _READ_ONLY:
                raise RequestError(f"Cannot write into the folder {str(probe)!r} (it is read-only or not yours); "
                                   f"choose another {flag} folder.") from None
            raise _os_error(exc, folder / "x", flag) from None
        os.close(fd)
        _unlink(tmp)

    def file(self, path, flag: str = "--out", suffixes: tuple[str, ...] | None = None) -> Path:
        """Plan one output file; every check happens now, before any computing."""
        target = Path(path)
        self._refuse_input(target, flag)
        if target.is_dir():
            raise RequestError(f"{flag} {str(target)!r} is an existing folder, not a file; "
                               f"give a file name{' ending in ' + _one_of(suffixes) if suffixes else ''}.")
        if suffixes and target.suffix.lower() not in suffixes:
            raise RequestError(f"Cannot tell the format of {flag} {str(target)!r}; end the name in {_one_of(suffixes)}.")
        key = Path(os.path.abspath(target))
        if key in self.planned:
            raise RequestError(f"{flag} and {self.planned[key]} both name {str(target)!r}; give each output its own path.")
        if target.exists() and not self.overwrite:
            raise RequestError(f"{str(target)!r} exists already; choose another {flag} or pass --overwrite.")
        folder = target.parent if str(target.parent) else Path(".")
        if not folder.is_dir() and Path(os.path.abspath(folder)) not in self.folders:
            raise RequestError(f"The output folder {str(folder)!r} does not exist; create it or choose another {flag} path.")
        self._writable(folder, flag)
        clean_stale(target)
        self.planned[key] = flag
        return target

    def folder(self, path, flag: str = "--out") -> Path:
        """Plan an output folder (created when `make_folders` runs); files in it are planned one by one."""
        target = Path(path)
        if target.exists() and not target.is_dir():
            raise RequestError(f"{flag} {str(target)!r} is a file, not a folder; give a folder name.")
        hit = is_input(target, self.inputs)
        if hit is not None and _same(target, hit):
            raise RequestError(f"{flag} {str(target)!r} is one of the inputs; choose another output folder.")
        self._writable(target, flag)
        self.folders.append(Path(os.path.abspath(target)))
        return target

    def make_folders(self) -> None:
        """Create the planned folders (remembering which ones this run created)."""
        for f in self.folders:
            missing = []
            p = f
            while not p.exists():
                missing.append(p)
                p = p.parent
            try:
                f.mkdir(parents=True, exist_ok=True)
            except OSError as exc:
                raise _os_error(exc, f / "x", "--out") from None
            self.created.extend(reversed(missing))

    # -- staging and commit ------------------------------------------------------------------
    def stage(self, path, data, keep_suffix: bool = False) -> Path:
        """Write one planned output (bytes, text or a writer function) to its temporary now;
        it lands at `commit`. `keep_suffix`: see `_write_temp` (writers that read the format
        from the name)."""
        target = Path(path)
        key = Path(os.path.abspath(target))
        if key not in self.planned:
            raise ValueError(f"{target} was not planned before computing")
        self.staged.append((_write_temp(target, data, self.planned[key], keep_suffix), target))
        return target

    def commit(self) -> list[Path]:
        """Rename every staged output into place, together; nothing else is left behind."""
        done = []
        with _signals_held():
            try:
                for tmp, target in self.staged:
                    _place(tmp, target, self.overwrite)
                    done.append(target)
            except BaseException:
                for target in done:  # not half a set: take back what landed (new files only)
                    if not self.overwrite:
                        _unlink(target)
                raise
            for folder in {t.parent for _, t in self.staged}:
                _fsync_dir(folder)
            self.staged = []
            self.committed = True
        return done

    def abort(self) -> None:
        """Remove every temporary and every folder this run created that is still empty."""
        for tmp, _ in self.staged:
            _unlink(tmp)
        self.staged = []
        for f in reversed(self.created):
            try:
                f.rmdir()
            except OSError:
                pass
        self.created = []

    def __enter__(self) -> "Outputs":
        return self

    def __exit__(self, *exc) -> None:
        if not self.committed:
            self.abort()

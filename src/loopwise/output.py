"""Writing what a command produces: one writer for every `--output` and for stdout.

The rules it keeps, for every command and every format:

- **Never over an input.** An output path that is (by file identity, so also
  through a symbolic or hard link) a model being read, a file a model `use`s,
  or the settings file is refused with a usage error (exit 2) before anything
  is written. Commands call `guard_inputs` (or `guard_output`) before the long
  work, so the mistake costs nothing, and the writer checks again.
- **Atomic.** The text goes to a temporary file in the same folder, is flushed
  to disk, and is renamed over the target: a write that fails half-way (disk
  full, a file size limit) leaves the previous file as it was and no temporary
  file behind. An existing target keeps its permissions; a new one gets the
  usual ones (0666 less the umask). A symbolic link is followed, so the file it
  points to is replaced and the link stays. Streams (`/dev/stdout`, a FIFO) are
  written directly: there is nothing to rename.
- **Any file name.** A path whose name is not UTF-8 (bytes the file system
  handed over undecoded) works; inside a report such names are shown with
  U+FFFD for the bytes that are not text, so every format stays valid UTF-8.
"""
from __future__ import annotations

import os
import stat
import sys
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterable, Iterator

from .errors import UsageError, display_name

__all__ = ["Protected", "protected_inputs", "guard_inputs", "guard_output", "write_output", "atomic_file",
           "emit"]

def _identity(path) -> tuple[int, int] | None:
    try:
        st = os.stat(path)
    except (OSError, ValueError):
        return None
    return st.st_dev, st.st_ino


class Protected:
    """The files an output must never replace, by file identity, with a word on
    what each one is (for the message)."""

    def __init__(self) -> None:
        self._what: dict[tuple[int, int], str] = {}

    def add(self, path, what: str) -> None:
        """Protect the file at `path` (by identity: another name for it is protected too);
        `what` says what it is. A path that does not exist protects nothing."""
        key = _identity(path)
        if key is not None:
            self._what.setdefault(key, what)

    def reason(self, output) -> str | None:
        """Why `output` may not be written (None: it may)."""
        key = _identity(output)
        return self._what.get(key) if key is not None else None


def protected_inputs(models: Iterable, settings=None) -> Protected:
    """Every model in `models`, every file they `use` (recursively) and the
    settings file: the inputs no output may replace."""
    from .sources import model_sources

    guard = Protected()
    for model in models:
        for source in model_sources(model):
            if source.used_by is None:
                guard.add(source.path, "an input model")
            else:
                guard.add(source.path, f"a file included by {Path(model).as_posix()}")
    source = getattr(settings, "source", None)
    if source:
        guard.add(source, "the settings file")
    return guard


def guard_inputs(output, models: Iterable, settings=None) -> Protected | None:
    """For a command about to write `output` (None: stdout): the inputs it must never
    replace (`protected_inputs`), checked now (`guard_output`), before the long work
    rather than after it. None when there is no output file."""
    if not output:
        return None
    protected = protected_inputs(models, settings)
    guard_output(output, protected)
    return protected


def guard_output(path, protected: Protected | None = None) -> None:
    """Refuse (UsageError) an output over an input or in a folder that does not exist."""
    where = display_name(os.fspath(path))
    if protected is not None:
        reason = protected.reason(path)
        if reason:
            raise UsageError(f"refusing to write to {where}: it is {reason}; "
                             "choose another output file")
    folder = Path(os.path.realpath(path)).parent
    if not folder.is_dir():
        raise UsageError(f"cannot write {where}: the folder {display_name(str(Path(path).parent))} "
                         "does not exist")


def _is_stream(path: str) -> bool:
    """An existing target that is neither a regular file nor a folder (a FIFO, a terminal)."""
    try:
        mode = os.stat(path).st_mode
    except OSError:
        return False
    return not (stat.S_ISREG(mode) or stat.S_ISDIR(mode))


def _new_mode(target: str) -> int:
    try:
        return stat.S_IMODE(os.stat(target).st_mode)
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


@contextmanager
def atomic_file(path, protected: Protected | None = None) -> Iterator[str]:
    """A temporary path (same folder and suffix as `path`) to write; on success it
    replaces `path`, on any failure it is removed and `path` is left as it was.
    For writers that want a file name (a figure's `savefig`)."""
    guard_output(path, protected)
    raw = os.fspath(path)
    target = os.path.realpath(raw)
    if _is_stream(target):
        try:
            yield target
        except OSError as exc:
            raise UsageError(f"cannot write {display_name(raw)}: {exc.strerror or exc}") from None
        return
    folder, name = os.path.split(target)
    try:
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{name}.",
                                   suffix=".tmp" + Path(name).suffix)
    except OSError as exc:
        raise UsageError(f"cannot write {display_name(raw)}: {exc.strerror or exc}") from None
    os.close(fd)
    try:
        yield tmp
        with open(tmp, "rb") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, _new_mode(target))
        os.replace(tmp, target)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise UsageError(f"cannot write {display_name(raw)}: {exc.strerror or exc}") from None
        raise


def write_output(path, content: str | bytes, protected: Protected | None = None) -> None:
    """Write `content` (text is UTF-8) to `path` atomically, never over an input."""
    data = display_name(content).encode("utf-8") if isinstance(content, str) else content
    with atomic_file(path, protected) as tmp:
        with open(tmp, "wb") as fh:
            fh.write(data)


def emit(text: str, output=None, protected: Protected | None = None) -> None:
    """The one way a command writes its result: to `output`, or to stdout."""
    if output is None:
        sys.stdout.write(display_name(text))
        sys.stdout.flush()
    else:
        write_output(output, text, protected)

"""Reading model files, and the folder an include must stay in.

One bounded reader serves every file loopwise reads as a model (a model named on
the command line, a file it `use`s, a source line shown under an error, and the
light scan of `loopwise.sources`): regular files only (a pipe or device named ``*.loop`` would block or never end), at
most `MAX_MODEL_BYTES` (enforced while reading, not trusted from the size the
file system reports), strict UTF-8.

An include must stay inside the *include root*: the git work tree that holds the
model (found by walking up to a `.git` entry, no git process), or outside git
the folder tree of the checked paths (the command line passes their common
folder) or, failing that, the model's own folder. Links are followed before
the check, so a link cannot lead out.
"""
from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

__all__ = ["MAX_MODEL_BYTES", "SourceError", "read_bytes", "read_source", "repository_root", "include_root",
           "common_root", "is_within"]

#: a model file larger than this is refused (a clear refusal, never a hang)
MAX_MODEL_BYTES = 4 * 1024 * 1024

_CHUNK = 1 << 16


class SourceError(Exception):
    """Why a file could not be read; the caller turns it into a located ModelError.

    `code` is the diagnostic for the file itself (LW001 unreadable, LW104 not
    UTF-8, LW105 too large); `line`, `col` locate a bad byte inside it.
    """

    def __init__(self, reason: str, code: str = "LW001", line: int = 0, col: int = 0):
        super().__init__(reason)
        self.reason = reason
        self.code = code
        self.line = line
        self.col = col


def read_bytes(path: str | os.PathLike, limit: int = MAX_MODEL_BYTES, *, refuse_larger: bool = True) -> bytes:
    """The bytes of a regular file: at most `limit` of them, or a SourceError.

    Opened without blocking (a FIFO would wait for a writer forever), checked to
    be a regular file on the open descriptor (no race with a swapped path), and
    read in chunks that stop one byte past the limit (`/dev/zero` cannot get
    here, and a file that grows while read cannot pass the limit). With
    `refuse_larger=False` a larger file is not refused: its first `limit` + 1
    bytes come back (enough to tell it from its first `limit`).
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0) \
        | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(path, flags)
    except FileNotFoundError:
        raise SourceError("no such file") from None
    except IsADirectoryError:
        raise SourceError("is a folder, not a model file") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise SourceError("a loop of symbolic links") from None
        raise SourceError(f"cannot read the file: {exc.strerror or exc}") from None
    try:
        info = os.fstat(fd)
        if stat.S_ISDIR(info.st_mode):
            raise SourceError("is a folder, not a model file")
        if not stat.S_ISREG(info.st_mode):
            raise SourceError("is not a regular file (a pipe, device or socket is never read)")
        if refuse_larger and info.st_size > limit:
            raise SourceError(_too_large(info.st_size, limit), "LW105")
        chunks, total = [], 0
        while total <= limit:
            chunk = os.read(fd, min(_CHUNK, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
        if refuse_larger and total > limit:
            raise SourceError(_too_large(total, limit), "LW105")
    except OSError as exc:
        raise SourceError(f"cannot read the file: {exc.strerror or exc}") from None
    finally:
        os.close(fd)
    return b"".join(chunks)


def read_source(path: str | os.PathLike, limit: int = MAX_MODEL_BYTES) -> str:
    """The text of a regular file of at most `limit` bytes, decoded as strict UTF-8
    (`read_bytes`); a SourceError says why not, and where a byte is not UTF-8."""
    data = read_bytes(path, limit)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = data[: exc.start]
        start = before.rfind(b"\n") + 1
        col = len(before[start:].decode("utf-8", errors="replace")) + 1
        raise SourceError("the file is not UTF-8 text here", "LW104",
                          before.count(b"\n") + 1, col) from None


def _too_large(size: int, limit: int) -> str:
    shown = f"{size // 1024} KiB" if size < limit * 4 else "more than 4 times the limit"
    return f"the file is too large ({shown}; the limit is {limit // (1024 * 1024)} MiB)"


# --- where includes may lead --------------------------------------------------------

def repository_root(folder: str | os.PathLike) -> Path | None:
    """The git work tree holding `folder`: the nearest folder with a `.git` entry
    (a folder, or the file a linked work tree or submodule has), or None."""
    here = Path(os.path.abspath(folder))
    for candidate in (here, *here.parents):
        if os.path.lexists(candidate / ".git"):
            return candidate
    return None


def is_within(path: Path, root: Path) -> bool:
    """Whether the (resolved) `path` is `root` or lies below it."""
    return path == root or root in path.parents


def include_root(model: str | os.PathLike | None, checked_root: str | os.PathLike | None = None) -> Path:
    """The folder every include of `model` must resolve into (resolved, links followed).

    The git work tree holding the model's folder; outside git, `checked_root`
    (the common folder of the paths a command checks) when it holds the model,
    else the model's own folder. `model` None stands for text with no file: the
    working directory takes the model's folder's place.
    """
    folder = Path(os.path.abspath(model)).parent if model is not None else Path.cwd()
    repo = repository_root(folder)
    if repo is not None:
        return repo.resolve()
    real = folder.resolve()
    if checked_root is not None:
        root = Path(checked_root).resolve()
        if is_within(real, root):
            return root
    return real


def common_root(paths) -> Path:
    """The deepest folder holding every checked path (a folder counts as itself)."""
    folders = []
    for p in paths:
        full = os.path.abspath(p)
        folders.append(full if os.path.isdir(full) else os.path.dirname(full))
    return Path(os.path.commonpath(folders)) if folders else Path.cwd()


"""Checking many models: find them (`discover`), check each (`check_one`, every
failure turned into located findings), in parallel processes if asked
(`loopwise.pool`), with a progress bar on a terminal (`loopwise.progress`),
gather the results in discovery order (`check_files`, `check_paths`), and
decide the exit status (`exit_status`).

Only the standard library is imported at module level; the analysis (numpy and
the engine) is imported on first use, so the command line starts fast.
"""
from __future__ import annotations

import os
import re
from functools import lru_cache, partial
from pathlib import Path

from .errors import Finding, ModelError, Span, UsageError
from .progress import progress_bar

__all__ = [
    "MODEL_SUFFIX", "models_in", "discover", "check_files", "check_paths", "check_outcomes",
    "check_one", "guarded",
    "exit_status", "has_warnings", "matches_glob",
]

MODEL_SUFFIX = ".loop"
#: codes for models that could not be checked at all (located syntax/model errors are LW1xx+)
E_UNREADABLE = "LW001"
E_NOT_TEXT = "LW002"
E_INCLUDED_ERRORS = "LW003"
E_INTERNAL = "LW900"


# --- finding the models --------------------------------------------------------

@lru_cache(maxsize=256)
def _glob_regex(pattern: str) -> re.Pattern:
    """A path glob as a regex: `**/` spans folders, `*` and `?` stay inside one."""
    out, i = [], 0
    while i < len(pattern):
        if pattern.startswith("**/", i):
            out.append("(?:.*/)?")
            i += 3
        elif pattern.startswith("**", i):
            out.append(".*")
            i += 2
        elif pattern[i] == "*":
            out.append("[^/]*")
            i += 1
        elif pattern[i] == "?":
            out.append("[^/]")
            i += 1
        elif pattern[i] == "[" and "]" in pattern[i + 2:]:
            end = pattern.index("]", i + 2)
            body = pattern[i + 1:end].replace("\\", "\\\\")
            out.append("[" + ("^" + body[1:] if body.startswith("!") else body) + "]")
            i = end + 1
        else:
            out.append(re.escape(pattern[i]))
            i += 1
    return re.compile("".join(out) + r"\Z")


def matches_glob(relpath: str, patterns: tuple[str, ...]) -> bool:
    """True when the slash-separated `relpath` matches one of `patterns`."""
    return any(_glob_regex(p.lstrip("/")).match(relpath) for p in patterns)


def _walk(folder: Path) -> list[Path]:
    """Every model under a folder, sorted; hidden folders (.git, .venv) are skipped.

    Symbolic links to folders are not followed (no loops); a link named *.loop is
    listed whatever it points to, so a broken or looping one is reported with
    the other models rather than lost."""
    found = []
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        found.extend(Path(root) / f for f in sorted(files) if f.endswith(MODEL_SUFFIX))
    return sorted(found, key=lambda p: p.relative_to(folder).parts)


def _real(path: Path) -> Path:
    # os.path.realpath never raises on a symbolic link loop (Path.resolve does)
    return Path(os.path.realpath(path))


def _relative(path: Path, base: Path) -> str:
    try:
        return _real(path).relative_to(_real(base)).as_posix()
    except ValueError:
        return path.as_posix()


def models_in(folder: Path, settings=None, base: Path | None = None) -> list[Path]:
    """The models under `folder` (see `_walk`) that the settings' include/exclude
    globs select, matched against the path relative to `base` (default: the
    settings file's folder, or the working directory). May be empty."""
    include = tuple(settings.include) if settings else ()
    exclude = tuple(settings.exclude) if settings else ()
    if base is None:
        base = Path(settings.source).parent if settings and settings.source else Path.cwd()
    return [f for f in _walk(folder)
            if (not include or matches_glob(_relative(f, base), include))
            and not matches_glob(_relative(f, base), exclude)]


def discover(paths, settings=None, base: Path | None = None) -> tuple[Path, ...]:
    """The model files named by `paths`, in argument order, each folder sorted.

    A file is taken as named (also a broken or looping symbolic link: checking
    it gives a located error). A folder is searched recursively for `*.loop`
    (`models_in`). Raises UsageError for a missing path or a folder that yields
    no model.
    """
    chosen: list[Path] = []
    seen: set[Path] = set()
    for raw in paths:
        path = Path(raw)
        if path.is_dir():
            files = models_in(path, settings, base)
            if not files:
                what = "no *.loop models" if not _walk(path) else \
                    "no models left after the include/exclude settings"
                raise UsageError(f"{raw}: {what} in this folder")
        elif os.path.lexists(path):
            files = [path]
        else:
            raise UsageError(f"{raw}: no such file or folder")
        for f in files:
            key = _real(f)
            if key not in seen:
                seen.add(key)
                chosen.append(f)
    return tuple(chosen)


# --- checking one model ----------------------------------------------------------

def _not_text(path: str, exc: UnicodeDecodeError) -> Finding:
    line, col = 0, 0
    try:
        data = Path(path).read_bytes()[: exc.start]
        line = data.count(b"\n") + 1
        col = exc.start - (data.rfind(b"\n") + 1) + 1
    except OSError:
        pass
    return Finding("error", E_NOT_TEXT, "the file is not UTF-8 text", Span(path, line, col),
                   "a model is plain UTF-8 text")


def check_one(path: str, settings=None, root=None) -> tuple[object | None, tuple[Finding, ...]]:
    """Check one model file: (ModelResult, ()) or (None, its errors as findings).

    `root` is the checked paths' common folder (where includes must stay outside git).
    Exceptions do not cross the process boundary (ModelError does not pickle),
    so every failure is turned into findings here.
    """
    from .analysis import check_file  # the heavy stages load on first use

    return guarded(path, lambda: check_file(path, settings=settings, root=root))


def guarded(path: str, work):
    """(work(), ()) or (None, the errors as findings): every failure of reading and
    checking the model at `path` becomes located findings (also used by `sweep`)."""
    try:
        return work(), ()
    except ModelError as exc:  # every unreadable model, with all its located errors
        return None, _name_the_model(path, exc.findings)
    except UnicodeDecodeError as exc:
        return None, (_not_text(path, exc),)
    except OSError as exc:
        reason = exc.strerror or str(exc)
        return None, (Finding("error", E_UNREADABLE, f"cannot read the model: {reason}",
                              Span(path, 0, 0)),)
    except RecursionError:
        return None, (Finding("error", E_INTERNAL, "the model is nested too deeply to analyse",
                              Span(path, 0, 0), "split deep expressions into named blocks"),)
    except Exception as exc:  # a bug: report it like any other failure, never a traceback
        if os.environ.get("LOOPWISE_DEBUG"):
            raise
        return None, (Finding("error", E_INTERNAL,
                              f"internal error while checking: {type(exc).__name__}: {exc}",
                              Span(path, 0, 0),
                              "please report this with the model; LOOPWISE_DEBUG=1 shows the trace"),)


def _name_the_model(path: str, errors: tuple[Finding, ...]) -> tuple[Finding, ...]:
    """When errors lie in a file the model `use`s, add one located at the model's own
    `use` line, so that each model a broken shared file stops is named (the shared
    errors themselves are reported once for the run). The model's own errors may be
    follow-ups (a name the broken file would have defined is unknown): the `use` line
    is named then too, first among the model's own errors."""
    own = _real(Path(path))
    broken = {_real(Path(e.span.file)) for e in errors if e.span.file and e.span.line > 0} - {own}
    if not broken or any(e.span.line <= 0 for e in errors):
        return errors
    from .sources import model_sources

    sources = model_sources(path)
    by_path = {s.path: s for s in sources}
    reached = next((s for s in sources if s.path in broken), None)
    step = reached
    while step is not None and step.used_by is not None and step.used_by != own:
        step = by_path.get(step.used_by)
    if reached is None or step is None or step.used_by != own:
        return errors  # not reached through `use` (a settings requirement, say)
    shown = next(e.span.file for e in errors if _real(Path(e.span.file)) == reached.path)
    col = _use_column(own, step.line)
    named = Finding("error", E_INCLUDED_ERRORS,
                    f"the model could not be checked: a file it uses has errors ({shown})",
                    Span(path, step.line, col, col + 3 if col else None),
                    "fix the errors reported in that file first: the names it defines are unknown until then")
    return (named, *errors)


def _use_column(path: Path, line: int) -> int:
    from .sources import read_regular

    data = read_regular(path) or b""
    lines = data.decode("utf-8", errors="replace").split("\n")
    text = lines[line - 1] if 0 < line <= len(lines) else ""
    return text.find("use") + 1


# --- checking many --------------------------------------------------------------

def _size(path) -> int:
    try:
        return os.stat(path).st_size
    except (OSError, ValueError):
        return 0


def _worker_stopped(path: str):
    return (None, (Finding("error", E_INTERNAL, "the worker process checking this model stopped",
                           Span(path, 0, 0), "try --jobs 1; the model may need more memory"),))


def check_outcomes(files, settings=None, jobs: int = 1, tick=None, root=None, roots=None) -> list[tuple]:
    """`check_one` for every file, in `jobs` processes (`loopwise.pool.run_pool`:
    largest file first, results in the order of `files`). `root`: see `check_files`;
    `roots`, one per file, when the files come from different trees (a diff's sides)."""
    from .pool import run_pool

    paths = [str(f) for f in files]
    if len(paths) > 1 and jobs != 1:
        from . import analysis  # noqa: F401  (loaded once here, forked workers inherit it)
    items = list(zip(paths, roots if roots is not None else [root] * len(paths)))
    return run_pool(partial(_check_in_root, settings=settings), items, jobs, cost=lambda item: _size(item[0]),
                    tick=tick, on_broken=lambda item: _worker_stopped(item[0]))


def _check_in_root(item: tuple[str, object], settings=None):
    path, root = item
    return check_one(path, settings, root)


def check_files(files, settings=None, jobs: int = 1, progress: bool = False, root=None):
    """Check these model files (from `discover`); a RunResult in their order.

    `root` is the folder tree of the checked paths, where includes must stay when
    a model is not in a git work tree (default: the common folder of `files`).

    `jobs` > 1 checks models in that many processes (0: one per CPU; capped at
    the CPUs), the order of the results does not depend on it. `progress`
    allows a progress bar on stderr for runs of more than a few models (the
    caller decides whether stderr is a terminal that wants one).
    """
    from . import __version__
    from . import arguments as arg
    from .results import RunResult
    from .settings import Settings
    from .waivers import unmatched_settings_waivers

    from .language.source import common_root

    jobs = arg.jobs_count(jobs)
    settings, progress = arg.settings_or_none(settings) or Settings(), arg.flag(progress, "progress")
    root = common_root(files) if root is None and files else root
    with progress_bar("checking", len(files), enabled=progress) as tick:
        outcomes = check_outcomes(files, settings, jobs, tick, root)
    models = tuple(m for m, _ in outcomes if m is not None)
    # an error outside the model itself (a shared `use` file, a settings requirement)
    # comes back from every model that meets it: report it once
    errors = tuple(dict.fromkeys(e for _, errs in outcomes for e in errs))
    return RunResult(models=models, errors=errors, version=__version__,
                     findings=unmatched_settings_waivers(settings, models))


def check_paths(paths, settings=None, jobs: int = 1, progress: bool = False):
    """Check every model named by `paths` (files or folders, see `discover`); a
    RunResult in discovery order. See `check_files` for `jobs` and `progress`."""
    from . import arguments as arg
    from .settings import Settings

    paths, settings = arg.model_paths(paths), arg.settings_or_none(settings) or Settings()
    jobs, progress = arg.jobs_count(jobs), arg.flag(progress, "progress")  # before any work
    from .language.source import common_root

    # outside git, includes stay inside the folder tree of the checked paths
    return check_files(discover(paths, settings), settings, jobs, progress, common_root(paths))


# --- the exit policy ---------------------------------------------------------------

def has_warnings(run) -> bool:
    """Whether a warning counts against the run: one not waived (`RunResult.open_warnings`)."""
    return bool(run.open_warnings)


def exit_status(run, fail_on_warnings: bool = False) -> int:
    """The whole exit policy: 2 a model could not be read; 1 an instability, an
    unmet requirement, or (with fail_on_warnings) a warning; 0 otherwise."""
    base = run.exit_code  # 2 unreadable, 1 unstable or unmet, 0 fine
    if base == 0 and fail_on_warnings and has_warnings(run):
        return 1
    return base

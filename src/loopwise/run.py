"""Running many models: find them, check each (in parallel processes if asked),
gather the results in a stable order, and decide the exit status.

Only the standard library is imported at module level; the analysis (numpy, and
scipy where it needs it) is imported by the worker on first use, so the command
line starts fast.
"""
from __future__ import annotations

import os
import re
import sys
from functools import lru_cache
from pathlib import Path

from .errors import Finding, ModelError, ModelErrors, Span, UsageError

__all__ = [
    "MODEL_SUFFIX", "discover", "check_paths", "check_one", "guarded", "exit_status", "has_warnings",
    "matches_glob",
]

MODEL_SUFFIX = ".loop"
#: below this many models a progress bar is more flicker than help
PROGRESS_MIN_MODELS = 6
#: codes for models that could not be checked at all (located syntax/model errors are LW1xx+)
E_UNREADABLE = "LW001"
E_NOT_TEXT = "LW002"
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
    """Every model under a folder, sorted; hidden folders (.git, .venv) are skipped."""
    found = []
    for root, dirs, files in os.walk(folder):
        dirs[:] = sorted(d for d in dirs if not d.startswith("."))
        found.extend(Path(root) / f for f in sorted(files) if f.endswith(MODEL_SUFFIX))
    return sorted(found, key=lambda p: p.relative_to(folder).parts)


def _relative(path: Path, base: Path) -> str:
    try:
        return path.resolve().relative_to(base.resolve()).as_posix()
    except ValueError:
        return path.as_posix()


def discover(paths, settings=None, base: Path | None = None) -> tuple[Path, ...]:
    """The model files named by `paths`, in argument order, each folder sorted.

    A file is taken as named. A folder is searched recursively for `*.loop`,
    and what it yields is filtered by the settings' include/exclude globs,
    matched against the path relative to `base` (the settings file's folder, or
    the working directory). Raises UsageError for a missing path or a folder
    that yields no model.
    """
    include = tuple(settings.include) if settings else ()
    exclude = tuple(settings.exclude) if settings else ()
    if base is None:
        base = Path(settings.source).parent if settings and settings.source else Path.cwd()
    chosen: list[Path] = []
    seen: set[Path] = set()
    for raw in paths:
        path = Path(raw)
        if path.is_dir():
            files = [f for f in _walk(path)
                     if (not include or matches_glob(_relative(f, base), include))
                     and not matches_glob(_relative(f, base), exclude)]
            if not files:
                what = "no *.loop models" if not _walk(path) else \
                    "no models left after the include/exclude settings"
                raise UsageError(f"{raw}: {what} in this folder")
        elif path.exists():
            files = [path]
        else:
            raise UsageError(f"{raw}: no such file or folder")
        for f in files:
            key = f.resolve()
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


def check_one(path: str, settings=None) -> tuple[object | None, tuple[Finding, ...]]:
    """Check one model file: (ModelResult, ()) or (None, its errors as findings).

    Exceptions do not cross the process boundary (ModelError does not pickle),
    so every failure is turned into findings here.
    """
    from .analysis import check_file  # the heavy stages load on first use

    return guarded(path, lambda: check_file(path, settings=settings))


def guarded(path: str, work):
    """(work(), ()) or (None, the errors as findings): every failure of reading and
    checking the model at `path` becomes located findings (also used by `sweep`)."""
    try:
        return work(), ()
    except ModelErrors as exc:
        return None, tuple(e.as_finding() for e in exc.errors)
    except ModelError as exc:
        return None, (exc.as_finding(),)
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


# --- checking many --------------------------------------------------------------

def _progress_bar(total: int):
    """A transient rich progress bar on stderr (imported only when drawn)."""
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, \
        TimeElapsedColumn

    bar = Progress(TextColumn("checking"), BarColumn(), MofNCompleteColumn(),
                   TimeElapsedColumn(), console=Console(stderr=True), transient=True)
    task = bar.add_task("models", total=total)
    return bar, (lambda: bar.advance(task))


def _run_serial(files, settings, tick):
    out = []
    for f in files:
        out.append(check_one(str(f), settings))
        tick()
    return out


def _worker_start() -> None:
    # Ctrl-C is the parent's to handle: workers that also caught it would each
    # print a traceback while the parent shuts the pool down
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_parallel(files, settings, jobs, tick):
    from concurrent.futures import ProcessPoolExecutor, as_completed

    from . import analysis  # noqa: F401  (loaded once here, forked workers inherit it)

    out: list = [None] * len(files)
    with ProcessPoolExecutor(max_workers=jobs, initializer=_worker_start) as pool:
        # larger files first (a rough proxy for cost) so a big model does not start
        # last and leave the other workers idle; results keep discovery order
        order = sorted(range(len(files)), key=lambda i: -_size(files[i]))
        futures = {pool.submit(check_one, str(files[i]), settings): i for i in order}
        try:
            for fut in as_completed(futures):
                i = futures[fut]
                out[i] = _outcome(fut, files[i])
                tick()
        except KeyboardInterrupt:
            pool.shutdown(wait=True, cancel_futures=True)  # only models in flight finish
            raise
    return out


def _size(path: Path) -> int:
    try:
        return path.stat().st_size
    except OSError:
        return 0


def _outcome(fut, path):
    from concurrent.futures.process import BrokenProcessPool

    try:
        return fut.result()
    except BrokenProcessPool:
        return (None, (Finding("error", E_INTERNAL, "the worker process checking this model stopped",
                               Span(str(path), 0, 0),
                               "try --jobs 1; the model may need more memory"),))


def check_paths(paths, settings=None, jobs: int = 1, progress: bool = False):
    """Check every model named by `paths`; a RunResult in discovery order.

    `jobs` > 1 checks models in that many processes (0: one per CPU); the order
    of the results does not depend on it. `progress` allows a progress bar on
    stderr for runs of more than a few models (the caller decides whether
    stderr is a terminal that wants one).
    """
    from . import __version__
    from .results import RunResult
    from .settings import Settings

    settings = settings or Settings()
    files = discover(paths, settings)
    if jobs == 0:
        jobs = os.cpu_count() or 1
    jobs = max(1, min(jobs, len(files)))
    bar, tick = None, (lambda: None)
    if progress and len(files) >= PROGRESS_MIN_MODELS:
        bar, tick = _progress_bar(len(files))
        bar.start()
    try:
        if jobs == 1:
            outcomes = _run_serial(files, settings, tick)
        else:
            outcomes = _run_parallel(files, settings, jobs, tick)
    finally:
        if bar is not None:
            bar.stop()
    models = tuple(m for m, _ in outcomes if m is not None)
    # an error outside the model itself (a shared `use` file, a settings requirement)
    # comes back from every model that meets it: report it once
    errors = tuple(dict.fromkeys(e for _, errs in outcomes for e in errs))
    return RunResult(models=models, errors=errors, version=__version__)


# --- the exit policy ---------------------------------------------------------------

def has_warnings(run) -> bool:
    return any(b.warnings for m in run.models for b in m.breaks) or any(
        f.severity == "warning" for m in run.models for f in m.findings)


def exit_status(run, fail_on_warnings: bool = False) -> int:
    """The whole exit policy: 2 a model could not be read; 1 an instability, an
    unmet requirement, or (with fail_on_warnings) a warning; 0 otherwise."""
    base = run.exit_code  # 2 unreadable, 1 unstable or unmet, 0 fine
    if base == 0 and fail_on_warnings and has_warnings(run):
        return 1
    return base


def wants_progress(stream=None) -> bool:
    """A progress bar only on an interactive terminal, never in a CI log."""
    stream = stream or sys.stderr
    if os.environ.get("CI") or os.environ.get("TERM") == "dumb":
        return False
    try:
        return stream.isatty()
    except (AttributeError, ValueError):
        return False

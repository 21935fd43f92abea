"""Checks of the public API's arguments (check_text, check_file, check_paths, and
loopwise.testing's analyse_loop, nyquist_verdict): a wrong type is a TypeError and a
wrong value a ValueError, each saying what was expected, before any work is done.

A value that slipped through would not fail loudly later: `indent="Right"` was
read as "left" by the contour and gave wrong verdicts.
"""
from __future__ import annotations

import os

__all__ = ["INDENTS", "check_indent", "model_text", "file_label", "model_path", "model_paths",
           "settings_or_none", "jobs_count", "flag", "loop_transfer", "break_name"]

#: which way the contour goes around poles on the imaginary axis
INDENTS = ("right", "left")


def _kind(value) -> str:
    return type(value).__name__


def check_indent(indent) -> str:
    """The contour's side of poles on the imaginary axis: `"right"` or `"left"`, exactly."""
    if not isinstance(indent, str):
        raise TypeError(f"indent must be 'right' or 'left' (a str), not {_kind(indent)}")
    if indent not in INDENTS:
        raise ValueError(f"indent must be 'right' or 'left' (lower case), not {indent!r}")
    return indent


def model_text(text) -> str:
    """A model given as text (`check_text`): a str; bytes and paths are refused with what to do."""
    if isinstance(text, str):
        return text
    if isinstance(text, (bytes, bytearray)):
        raise TypeError("check_text takes the model as str, not bytes: decode it first, "
                        "e.g. data.decode('utf-8')")
    if isinstance(text, os.PathLike):
        raise TypeError(f"check_text takes the model's text, not a path ({text!r}): use check_file(path)")
    raise TypeError(f"check_text takes the model's text as a str, not {_kind(text)}")


def file_label(file) -> str:
    """The name a text is reported under: a str or a path."""
    if isinstance(file, str):
        return file
    if isinstance(file, os.PathLike) and isinstance(os.fspath(file), str):
        return os.fspath(file)
    raise TypeError(f"file must be a str or a path (the name the model is reported under), not {_kind(file)}")


def model_path(path, what: str = "path") -> str:
    """A path to a model (or to `what`): a non-empty str or `os.PathLike`, returned as a str."""
    if isinstance(path, os.PathLike):
        path = os.fspath(path)
    if isinstance(path, (bytes, bytearray)):
        raise TypeError(f"{what} must be a str or a pathlib.Path, not bytes: decode it first")
    if not isinstance(path, str):
        raise TypeError(f"{what} must be a str or a pathlib.Path, not {_kind(path)}")
    if not path:
        raise ValueError(f"{what} is empty")
    return path


def model_paths(paths) -> tuple[str, ...]:
    """One path or an iterable of them (a single str is one path, not its characters)."""
    if isinstance(paths, (str, os.PathLike)):
        return (model_path(paths),)
    if isinstance(paths, (bytes, bytearray)):
        raise TypeError("paths must be a str, a pathlib.Path or a list of them, not bytes")
    try:
        items = tuple(paths)
    except TypeError:
        raise TypeError(f"paths must be a str, a pathlib.Path or a list of them, not {_kind(paths)}") from None
    if not items:
        raise ValueError("paths is empty: name at least one model file or folder")
    return tuple(model_path(p, "each of paths") for p in items)


def settings_or_none(settings):
    """A `loopwise.settings.Settings` or None (the defaults), as given."""
    from .settings import Settings

    if settings is not None and not isinstance(settings, Settings):
        raise TypeError(f"settings must be a loopwise.settings.Settings (see load_settings) or None, "
                        f"not {_kind(settings)}")
    return settings


def jobs_count(jobs) -> int:
    """A number of processes: a whole number, 0 meaning one per CPU."""
    if isinstance(jobs, bool) or not isinstance(jobs, int):
        raise TypeError(f"jobs must be a whole number (0: one per CPU), not {_kind(jobs)}")
    if jobs < 0:
        raise ValueError(f"jobs must be 0 (one per CPU) or more, not {jobs}")
    return jobs


def flag(value, name: str) -> bool:
    """A True or False option named `name` (no other value stands for one)."""
    if not isinstance(value, bool):
        raise TypeError(f"{name} must be True or False, not {_kind(value)}")
    return value


def loop_transfer(L):
    """A loop transfer function for `testing.analyse_loop` / `testing.nyquist_verdict`:
    a `loopwise.transfer.Transfer`."""
    from .transfer import Transfer

    if not isinstance(L, Transfer):
        raise TypeError(f"L must be a loopwise.transfer.Transfer (e.g. Transfer.from_coeffs(num, den) "
                        f"or Transfer.from_zpk(zeros, poles, gain)), not {_kind(L)}")
    return L


def break_name(name) -> str:
    """The label a single loop is reported under: any non-empty text."""
    if not isinstance(name, str):
        raise TypeError(f"name must be a str, not {_kind(name)}")
    if not name.strip():
        raise ValueError("name is empty: give the loop a label")
    return name

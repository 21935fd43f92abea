"""Project settings: `[tool.loopwise]` in pyproject.toml or a `loopwise.toml`.

Looked up from the working directory upwards to the repository root (the first
folder holding `.git`) or the file system root. Command-line options win over
the file. Keys (all optional)::

    [tool.loopwise]                      # or top level of loopwise.toml
    requirements = ["* phase_margin >= 45deg", "* gain_margin >= 6dB"]
    include = ["models/**/*.loop"]
    exclude = ["models/scratch/**"]
    fail_on_warnings = false

    [tool.loopwise.regression]           # what `loopwise diff` calls a regression
    phase_margin_loss_deg = 5.0          # common practice, no source
    gain_margin_loss_db = 2.0            # common practice, no source
    delay_margin_loss_fraction = 0.20    # common practice, no source
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from .errors import UsageError

__all__ = ["Settings", "Regression", "load_settings", "load_settings_file", "find_config"]


@dataclass(frozen=True)
class Regression:
    """Thresholds for `loopwise diff` (defaults are common practice, no source)."""

    phase_margin_loss_deg: float = 5.0
    gain_margin_loss_db: float = 2.0
    delay_margin_loss_fraction: float = 0.20
    verdict_to_unstable: bool = True
    requirement_stops_being_met: bool = True


@dataclass(frozen=True)
class Settings:
    requirements: tuple[str, ...] = ()
    include: tuple[str, ...] = ()
    exclude: tuple[str, ...] = ()
    fail_on_warnings: bool = False
    regression: Regression = field(default_factory=Regression)
    source: str | None = None  # the file the settings came from
    overrides: tuple[tuple[str, float], ...] = ()  # `--set NAME=VALUE` from the command line
    raw: dict = field(default_factory=dict)


def find_config(start: Path | None = None) -> tuple[Path, dict] | None:
    """The nearest settings file from `start` up to the repository root, and its table."""
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        own = folder / "loopwise.toml"
        if own.is_file():
            return own, _read(own)
        pyproject = folder / "pyproject.toml"
        if pyproject.is_file():
            table = _read(pyproject).get("tool", {}).get("loopwise")
            if table is not None:
                return pyproject, table
        if (folder / ".git").exists():
            break
    return None


def _read(path: Path) -> dict:
    try:
        with path.open("rb") as fh:
            return tomllib.load(fh)
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise UsageError(f"cannot read settings from {path}: {exc}") from None


def _strings(table: dict, key: str, where: str) -> tuple[str, ...]:
    value = table.get(key, [])
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise UsageError(f"{where}: `{key}` must be a list of strings")
    return tuple(value)


def load_settings(start: Path | None = None) -> Settings:
    found = find_config(start)
    if found is None:
        return Settings()
    path, table = found
    return _from_table(path, table)


def load_settings_file(path: Path | str) -> Settings:
    """Settings from one named file (`--config`): a loopwise.toml, or a pyproject.toml's
    `[tool.loopwise]` table."""
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"settings file {path} does not exist")
    table = _read(path)
    if path.name == "pyproject.toml":
        if "loopwise" not in table.get("tool", {}):
            raise UsageError(f"{path} has no [tool.loopwise] table")
        table = table["tool"]["loopwise"]
    if not isinstance(table, dict):
        raise UsageError(f"{path}: [tool.loopwise] must be a table")
    return _from_table(path, table)


def _from_table(path: Path, table: dict) -> Settings:
    where = str(path)
    known = {"requirements", "include", "exclude", "fail_on_warnings", "regression"}
    unknown = sorted(set(table) - known)
    if unknown:
        raise UsageError(f"{where}: unknown setting(s) {', '.join(unknown)}; known: {', '.join(sorted(known))}")
    fail = table.get("fail_on_warnings", False)
    if not isinstance(fail, bool):
        raise UsageError(f"{where}: `fail_on_warnings` must be true or false")
    reg_table = table.get("regression", {})
    if not isinstance(reg_table, dict):
        raise UsageError(f"{where}: `regression` must be a table")
    defaults = Regression()
    reg_kwargs = {}
    for key, value in reg_table.items():
        if not hasattr(defaults, key):
            raise UsageError(f"{where}: unknown regression setting `{key}`")
        expected = type(getattr(defaults, key))
        if expected is float and isinstance(value, (int, float)) and not isinstance(value, bool):
            reg_kwargs[key] = float(value)
        elif expected is bool and isinstance(value, bool):
            reg_kwargs[key] = value
        else:
            raise UsageError(f"{where}: regression setting `{key}` must be a {expected.__name__}")
    return Settings(
        requirements=_strings(table, "requirements", where),
        include=_strings(table, "include", where),
        exclude=_strings(table, "exclude", where),
        fail_on_warnings=fail,
        regression=Regression(**reg_kwargs),
        source=where,
        raw=table,
    )

"""Project settings: `[tool.loopwise]` in pyproject.toml, or a `loopwise.toml`
(its top level, or its own `[tool.loopwise]` table).

Looked up from the working directory upwards to the repository root (the first
folder holding `.git`) or the file system root. Command-line options win over
the file. Keys (all optional)::

    [tool.loopwise]                      # or the top level of loopwise.toml
    requirements = ["* phase_margin >= 45deg", "* gain_margin >= 6dB"]
    include = ["models/**/*.loop"]
    exclude = ["models/scratch/**"]
    fail_on_warnings = false

    [tool.loopwise.regression]           # what `loopwise diff` calls a regression
    phase_margin_loss_deg = 5.0          # common practice, no source
    gain_margin_loss_db = 2.0            # common practice, no source
    delay_margin_loss_fraction = 0.20    # common practice, no source
    near_requirement_deg = 5.0           # a loss matters within this of a requirement's limit (0 to 180)
    near_requirement_db = 2.0            # (dB, 0 or more)
    near_requirement_fraction = 0.20     # (delay margin: a fraction of the limit, 0 to 1)
    relevant_phase_margin_deg = 60.0     # ... or below these levels (common practice, no source;
    relevant_gain_margin_db = 12.0       #     0 switches a level off; deg 0 to 180, dB and s 0 or more)
    relevant_delay_margin_s = 0.0

    [[tool.loopwise.waive]]              # accepted warnings, per file glob
    files = "models/tanks/*.loop"
    code = "LW382"
    at = "balance"                       # optional: only findings about this name
    reason = "balance pipe between the tanks, not a control loop"

Every value is checked when the file is read; a mistake is a located error
(`file:line:col`, the line, a caret, a hint; exit 2), never a silent default.
Params set with `--set NAME=VALUE` (`Settings.overrides`) come from the command
line only; settings made in code are checked alike (TypeError / ValueError).
"""
from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field, fields
from pathlib import Path

from .errors import Finding, ModelError, Span, UsageError, render
from .language.hints import did_you_mean
from .waivers import Waiver, check_code, check_reason

__all__ = ["Settings", "Regression", "SettingsError", "load_settings", "load_settings_file", "find_config",
           "regression_problem", "glob_problem", "overrides_problem"]

#: the range of each regression threshold; a value beyond it could never be exceeded,
#: so it would switch that part of the diff gate off without saying so
_THRESHOLDS = {
    "phase_margin_loss_deg": (0.0, 180.0, "degrees of phase margin, 0 to 180"),
    "gain_margin_loss_db": (0.0, math.inf, "dB of gain margin, 0 or more"),
    "delay_margin_loss_fraction": (0.0, 1.0, "a fraction of the delay margin, 0 to 1 (0.2 is 20%)"),
    # where a loss matters: a distance to a requirement's limit, and levels below which
    # a margin matters on its own. A phase margin lies within 0 to 180 deg, so a wider
    # distance or a higher level means nothing more; a fraction above 1 is most likely
    # a percentage written as a number (20 for 20%); a negative level or distance
    # would switch the check off without saying so (0 is the documented way)
    "near_requirement_deg": (0.0, 180.0, "degrees of phase margin, 0 to 180"),
    "near_requirement_db": (0.0, math.inf, "dB of gain margin, 0 or more"),
    "near_requirement_fraction": (0.0, 1.0, "a fraction of the requirement's limit, 0 to 1 (0.2 is 20%)"),
    "relevant_phase_margin_deg": (0.0, 180.0, "degrees of phase margin, 0 to 180 (0: off)"),
    "relevant_gain_margin_db": (0.0, math.inf, "dB of gain margin, 0 or more (0: off)"),
    "relevant_delay_margin_s": (0.0, math.inf, "seconds of delay margin, 0 or more (0: off)"),
}

#: the thresholds of a loss; the others say where a loss matters
_LOSSES = ("phase_margin_loss_deg", "gain_margin_loss_db", "delay_margin_loss_fraction")


def regression_problem(key: str, value) -> str | None:
    """What is wrong with a regression threshold's value, or None when it is fine."""
    low, high, what = _THRESHOLDS[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return f"must be a number ({what}), not {type(value).__name__}"
    if not math.isfinite(value):
        return f"must be a finite number ({what}), not {value}"
    if not low <= value <= high:
        return f"must be {what}, not {value:g}"
    return None


def _regression_hint(key: str) -> str:
    if key in _LOSSES:
        return "a threshold that no loss can exceed would switch that part of the diff gate off without saying so"
    if key in _THRESHOLDS:
        return ("a distance or level out of its range cannot say where a loss matters; "
                "0 switches a level off")
    return "write true or false (no quotes)"


def glob_problem(pattern) -> str | None:
    """What is wrong with an include / exclude / waiver glob, or None."""
    from .run import matches_glob  # the one glob matcher (run.py imports only the standard library)

    if not isinstance(pattern, str):
        return f"a glob is a string, not {type(pattern).__name__}"
    if not pattern.strip("/"):
        return "an empty glob matches no file"
    try:
        matches_glob("", (pattern,))
    except re.error as exc:
        return f"`{pattern}` is not a valid glob ({exc.msg})"
    return None


@dataclass(frozen=True)
class Regression:
    """Thresholds for `loopwise diff` (defaults are common practice, no source)."""

    phase_margin_loss_deg: float = 5.0
    gain_margin_loss_db: float = 2.0
    delay_margin_loss_fraction: float = 0.20
    verdict_to_unstable: bool = True
    requirement_stops_being_met: bool = True
    # a margin loss beyond its threshold is a regression only where it matters: it
    # fails or comes this close to a requirement on that margin ...
    near_requirement_deg: float = 5.0
    near_requirement_db: float = 2.0
    near_requirement_fraction: float = 0.20
    # ... or it ends below these levels (common practice, no source; 0 switches one off)
    relevant_phase_margin_deg: float = 60.0
    relevant_gain_margin_db: float = 12.0
    relevant_delay_margin_s: float = 0.0

    def __post_init__(self):
        for f in fields(self):
            value = getattr(self, f.name)
            problem = regression_problem(f.name, value) if f.name in _THRESHOLDS else (
                None if isinstance(value, bool) else f"must be true or false, not {type(value).__name__}")
            if problem:
                raise ValueError(f"regression setting `{f.name}` {problem}")


def overrides_problem(overrides) -> tuple[str, str] | None:
    """What is wrong with params set from outside (`--set NAME=VALUE`): ("type", words)
    for a wrong type, ("value", words) for a wrong value, None when they are fine. They
    come from the command line only, never from a settings file."""
    if not isinstance(overrides, tuple) or not all(
            isinstance(o, tuple) and len(o) == 2 and isinstance(o[0], str) for o in overrides):
        return "type", "must be a tuple of (param name, number) pairs"
    for name, value in overrides:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return "type", f"`{name}`: the value must be a number, not {type(value).__name__}"
        if not name.isidentifier():
            return "value", f"`{name}` is not a param name"
        if not math.isfinite(value):
            return "value", f"`{name}` must be a finite number, not {value}"
    names = [name for name, _ in overrides]
    twice = sorted({n for n in names if names.count(n) > 1})
    if twice:
        return "value", f"set `{twice[0]}` more than once"
    return None


@dataclass(frozen=True)
class Settings:
    """A project's settings, every value checked: default requirements for every break,
    the include and exclude globs for folders, fail_on_warnings, the regression
    policy of `loopwise diff`, the waivers; where they came from (`source`, as shown);
    and the params `--set` fixes for this run."""

    requirements: tuple[str, ...] = ()
    include: tuple[str, ...] = ()
    exclude: tuple[str, ...] = ()
    fail_on_warnings: bool = False
    regression: Regression = field(default_factory=Regression)
    source: str | None = None  # the file the settings came from
    waivers: tuple[Waiver, ...] = ()
    overrides: tuple[tuple[str, float], ...] = ()  # `--set NAME=VALUE` from the command line

    def __post_init__(self):
        for key in ("requirements", "include", "exclude"):
            value = getattr(self, key)
            if isinstance(value, str) or not all(isinstance(v, str) for v in value):
                raise TypeError(f"Settings.{key} must be a tuple of strings")
        for pattern in (*self.include, *self.exclude):
            if glob_problem(pattern):
                raise ValueError(f"Settings: {glob_problem(pattern)}")
        if not isinstance(self.fail_on_warnings, bool):
            raise TypeError("Settings.fail_on_warnings must be True or False")
        if not isinstance(self.regression, Regression):
            raise TypeError("Settings.regression must be a loopwise.settings.Regression")
        if not all(isinstance(w, Waiver) and w.files for w in self.waivers):
            raise TypeError("Settings.waivers must be loopwise.waivers.Waiver entries with `files` globs")
        problem = overrides_problem(self.overrides)
        if problem:
            raise (TypeError if problem[0] == "type" else ValueError)(f"Settings.overrides {problem[1]}")


class SettingsError(UsageError):
    """A mistake in a settings file, located at its key: rendered with the line and a caret."""

    def __init__(self, finding: Finding, text: str | None):
        super().__init__(finding.message)
        self.finding = finding
        self.text = text

    def __str__(self) -> str:
        return render(self.finding, self.text)


# --- where a key stands in the TOML text ----------------------------------------------------

_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\[\]#]+?)\s*\]\]?\s*(?:#.*)?$")


def _dotted(text: str) -> tuple[str, ...]:
    return tuple(part.strip().strip("\"'") for part in text.split("."))


class _Source:
    """The settings file's text, for locating keys (TOML parsers give no positions)."""

    def __init__(self, path: str, text: str):
        self.path, self.text = path, text  # the name as shown (`_shown_path`)
        self.lines = text.split("\n")
        self.sections: list[tuple[tuple[str, ...], bool, int]] = [((), False, 0)]  # (table, array?, first line)
        for n, line in enumerate(self.lines):
            m = _HEADER.match(line)
            if m:
                self.sections.append((_dotted(m.group(2)), m.group(1) == "[[", n))

    def _range(self, k: int) -> range:
        start = self.sections[k][2]
        end = self.sections[k + 1][2] if k + 1 < len(self.sections) else len(self.lines)
        return range(start, end)

    def _find(self, rows, pattern: str, skip: int = 0) -> tuple[int, int, int] | None:
        regex = re.compile(pattern)
        for n in rows:
            for m in regex.finditer(self.lines[n]):
                if skip == 0:
                    return n, m.start(1), m.end(1)
                skip -= 1
        return None

    def span(self, table: tuple[str, ...], key: str | None = None, index: int | None = None,
             value: str | None = None) -> Span:
        """Where `key` (or the string `value` under it) stands in `table` (the index-th of an
        array of tables); falls back to the table's header, then to line 1."""
        hits = [k for k, (path, array, _) in enumerate(self.sections) if path == table]
        if key is not None and index is None:  # a table given by its own header: [tool.other]
            own = [k for k, (path, _, _) in enumerate(self.sections) if path == (*table, key)]
            if own and not any(self._find(self._range(k), r"^\s*[\"']?(" + re.escape(key) + r")[\"']?\s*[.=]")
                               for k in hits):
                n = self.sections[own[0]][2]
                return Span(self.path, n + 1, 1, len(self.lines[n].rstrip()) + 1)
        if index is not None and len(hits) > index:
            hits = [hits[index]]
        key_re = None if key is None else r"^\s*[\"']?(" + re.escape(key) + r")[\"']?\s*="
        for k in hits:
            rows = self._range(k)
            found = self._find(rows, key_re) if key_re else None
            if found and value is not None:
                found = self._find(range(found[0], rows.stop), r"(\"" + re.escape(value) + r"\"|'"
                                   + re.escape(value) + r"')") or found
            if found:
                return self._at(*found)
        # a dotted key or an inline table under a parent table: `regression.x = 1`, `regression = {x = 1}`
        for cut in range(len(table), -1, -1):
            parent, rest = table[:cut], table[cut:]
            for k, (path, _, _) in enumerate(self.sections):
                if path != parent or not rest:
                    continue
                rows = self._range(k)
                start = self._find(rows, r"^\s*[\"']?(" + re.escape(rest[0]) + r")[\"']?\s*[.=]")
                if start and key is not None:
                    found = self._find(range(start[0], rows.stop), r"\b(" + re.escape(key) + r")\s*=",
                                       skip=index or 0)
                    return self._at(*(found or start))
                if start:
                    return self._at(*start)
        if hits:
            n = self.sections[hits[0]][2]
            return Span(self.path, n + 1, 1, len(self.lines[n].rstrip()) + 1)
        return Span(self.path, 1, 1)

    def _at(self, n: int, start: int, end: int) -> Span:
        return Span(self.path, n + 1, start + 1, end + 1)

    def error(self, code: str, message: str, span: Span, hint: str | None) -> SettingsError:
        return SettingsError(Finding("error", code, message, span, hint), self.text)


# --- reading ------------------------------------------------------------------------------

_TOML_POSITION = re.compile(r"\(at line (\d+), column (\d+)\)")


def _shown_path(path: Path) -> str:
    """A settings file's name as messages, findings and waivers show it: relative to the
    working directory when it lies inside it, as the models named on the command line
    are; absolute only when it lies outside (a name given relative stays as given)."""
    if path.is_absolute():
        try:
            return str(path.relative_to(Path.cwd().resolve()))
        except (ValueError, OSError):
            pass
    return str(path)


def _parse(path: Path) -> tuple[_Source, dict]:
    shown = _shown_path(path)
    try:
        text = path.read_bytes().decode("utf-8")
    except OSError as exc:
        raise UsageError(f"cannot read settings from {shown}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise UsageError(f"cannot read settings from {shown}: it is not UTF-8 text") from None
    source = _Source(shown, text)
    try:
        return source, tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = _TOML_POSITION.search(str(exc))
        span = Span(shown, int(m.group(1)), int(m.group(2))) if m else Span(shown, 1, 1)
        message = _TOML_POSITION.sub("", str(exc)).strip()
        raise source.error("LW010", f"the settings file is not valid TOML: {message}", span,
                           "see https://toml.io for the syntax; strings need double quotes") from None


def _loopwise_table(path: Path, source: _Source, data: dict) -> tuple[dict, tuple[str, ...]] | None:
    """The loopwise table of a settings file and its place; None for a pyproject.toml without one."""
    tool = data.get("tool")
    if path.name == "pyproject.toml":
        if not isinstance(tool, dict) or "loopwise" not in tool:
            return None
        table, where = tool["loopwise"], ("tool", "loopwise")
    elif tool is None:
        return data, ()
    else:
        if not isinstance(tool, dict) or "loopwise" not in tool:
            raise source.error("LW011", "`tool` is not a loopwise setting", source.span((), "tool"),
                               "write the settings at the top level of loopwise.toml, or under [tool.loopwise]")
        others = [k for k in data if k != "tool"] + [f"tool.{k}" for k in tool if k != "loopwise"]
        if others:
            first = others[0]
            span = source.span(("tool",), first[5:]) if first.startswith("tool.") else source.span((), first)
            raise source.error("LW011", f"`{first}` lies outside [tool.loopwise]", span,
                               "in loopwise.toml, write every setting either at the top level or under "
                               "[tool.loopwise], not both")
        table, where = tool["loopwise"], ("tool", "loopwise")
    if not isinstance(table, dict):
        raise source.error("LW012", "[tool.loopwise] must be a table", source.span(where[:-1], where[-1]),
                           "write `[tool.loopwise]` on its own line and the settings below it")
    return table, where


def find_config(start: Path | None = None) -> tuple[Path, dict] | None:
    """The nearest settings file from `start` up to the repository root, and its loopwise table."""
    found = _find(start)
    return None if found is None else (found[0], found[2][0])


def _find(start: Path | None):
    here = (start or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        for name in ("loopwise.toml", "pyproject.toml"):
            candidate = folder / name
            if candidate.is_file():
                source, data = _parse(candidate)
                table = _loopwise_table(candidate, source, data)
                if table is not None:
                    return candidate, source, table
        if (folder / ".git").exists():
            break
    return None


def load_settings(start: Path | None = None) -> Settings:
    """The settings of the nearest settings file from `start` (default: the working
    directory) up to the repository root (`find_config`); the defaults when there is none.
    A mistake in the file raises a located `SettingsError`."""
    found = _find(start)
    if found is None:
        return Settings()
    path, source, (table, where) = found
    return _Reader(source, where).settings(table)


def load_settings_file(path: Path | str) -> Settings:
    """Settings from one named file (`--config`): a loopwise.toml, or a pyproject.toml's
    `[tool.loopwise]` table."""
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"settings file {path} does not exist")
    source, data = _parse(path)
    found = _loopwise_table(path, source, data)
    if found is None:
        raise UsageError(f"{path} has no [tool.loopwise] table")
    table, where = found
    return _Reader(source, where).settings(table)


# --- checking every value -------------------------------------------------------------------

_KEYS = ("requirements", "include", "exclude", "fail_on_warnings", "regression", "waive")
_WAIVER_KEYS = ("files", "code", "at", "reason")


class _Reader:
    def __init__(self, source: _Source, where: tuple[str, ...]):
        self.source, self.where = source, where

    def fail(self, code: str, message: str, table: tuple[str, ...], key=None, hint=None, index=None, value=None):
        span = self.source.span(self.where + table, key, index, value)
        raise self.source.error(code, message, span, hint)

    def unknown(self, table: dict, known: tuple[str, ...], sub: tuple[str, ...] = (), index=None) -> None:
        for key in table:
            if key not in known:
                self.fail("LW011", f"unknown setting `{key}`", sub, key,
                          did_you_mean(key, known) or "settings: " + ", ".join(known), index)

    def strings(self, table: dict, key: str, sub=(), index=None, globs=False) -> tuple[str, ...]:
        value = table.get(key, [])
        if isinstance(value, str):
            value = [value]
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            self.fail("LW012", f"`{key}` must be a list of strings", sub, key,
                      f'for example `{key} = ["models/**/*.loop"]`' if globs else
                      f'for example `{key} = ["* phase_margin >= 45deg"]`', index)
        for v in value if globs else ():
            problem = glob_problem(v)
            if problem:
                self.fail("LW013", problem, sub, key, "globs use `*` within a folder, `**` across folders, "
                          "`?` one character and `[abc]` a set (`[a-z]` a range, low to high)", index, v)
        return tuple(value)

    def settings(self, table: dict) -> Settings:
        self.unknown(table, _KEYS)
        fail = table.get("fail_on_warnings", False)
        if not isinstance(fail, bool):
            self.fail("LW012", "`fail_on_warnings` must be true or false", (), "fail_on_warnings",
                      "write `fail_on_warnings = true` (no quotes)")
        return Settings(
            requirements=self.strings(table, "requirements"),
            include=self.strings(table, "include", globs=True),
            exclude=self.strings(table, "exclude", globs=True),
            fail_on_warnings=fail,
            regression=self.regression(table.get("regression", {})),
            source=self.source.path,
            waivers=self.waivers(table.get("waive", [])),
        )

    def regression(self, table) -> Regression:
        if not isinstance(table, dict):
            self.fail("LW012", "`regression` must be a table", (), "regression",
                      "write `[tool.loopwise.regression]` with one threshold per line below it")
        sub = ("regression",)
        self.unknown(table, tuple(f.name for f in fields(Regression)), sub)
        for key, value in table.items():
            problem = regression_problem(key, value) if key in _THRESHOLDS else (
                None if isinstance(value, bool) else "must be true or false")
            if problem:
                self.fail("LW012", f"regression setting `{key}` {problem}", sub, key, _regression_hint(key))
        return Regression(**table)

    def waivers(self, entries) -> tuple[Waiver, ...]:
        if isinstance(entries, dict):
            entries = [entries]
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            self.fail("LW012", "`waive` must be a list of tables", (), "waive",
                      'write each waiver as `[[tool.loopwise.waive]]` with files, code, reason and '
                      'optionally at')
        return tuple(self.waiver(entry, i) for i, entry in enumerate(entries))

    def waiver(self, entry: dict, i: int) -> Waiver:
        sub = ("waive",)
        self.unknown(entry, _WAIVER_KEYS, sub, i)
        for key in ("files", "code", "reason"):
            if key not in entry:
                self.fail("LW012", f"a waiver needs `{key}`", sub, None,
                          'e.g. files = "models/tanks/*.loop", code = "LW382", reason = "why it is accepted"', i)
        files = self.strings(entry, "files", sub, i, globs=True)
        if not files:
            self.fail("LW012", "a waiver's `files` must name at least one glob", sub, "files",
                      'for every model: files = "**/*.loop"', i)
        for key in ("code", "reason", "at"):
            if key in entry and not isinstance(entry[key], str):
                self.fail("LW012", f"a waiver's `{key}` must be a string", sub, key, None, i)
        code_span = self.source.span(self.where + sub, "code", i)
        try:
            check_code(entry["code"], code_span)
            reason = check_reason(entry["reason"], self.source.span(self.where + sub, "reason", i),
                                  'say why the finding is accepted: reason = "..."')
        except ModelError as exc:
            raise SettingsError(exc.as_finding(), self.source.text) from None
        at = entry.get("at")
        if at is not None and not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", at):
            self.fail("LW012", f"a waiver's `at` must be a break, signal or block name, not {at!r}", sub, "at",
                      "names are letters, digits and `_`", i)
        return Waiver(entry["code"], reason, code_span, at, files)

"""The parser and its LALR tables, shipped inside the package.

Building the tables from the grammar takes a noticeable part of start-up, and
lark's own cache keeps them as a pickle under a predictable name in the shared
temp folder, where another user could plant one that runs code when loaded.
So the tables are generated once into `lalr_tables.json` next to this module
(plain JSON: loading it can build nothing but lists, dicts and numbers) and
loaded from the package. They are used only when they were made from this very
grammar (the file keeps the grammar's text to compare) by the lark version that
is installed; otherwise the parser is built from the grammar (slower, never
wrong). A test fails when the shipped tables are stale.

After editing grammar/loopwise.lark, regenerate them:

    python -m loopwise.language.tables
"""
from __future__ import annotations

import functools
import json
from importlib import resources
from pathlib import Path

import lark
from lark import Lark

__all__ = ["grammar_text", "build_parser", "load_parser", "shipped_tables",
           "tables_json", "TABLES_FILE"]

#: the generated tables, next to this module (package data)
TABLES_FILE = Path(__file__).with_name("lalr_tables.json")

_OPTIONS = dict(parser="lalr", propagate_positions=True, maybe_placeholders=False)


@functools.lru_cache(maxsize=1)
def grammar_text() -> str:
    """The grammar, from the installed package or from the source tree."""
    try:
        return resources.files("loopwise").joinpath("grammar/loopwise.lark").read_text("utf-8")
    except (FileNotFoundError, OSError, ModuleNotFoundError):
        here = Path(__file__).resolve()
        for parent in here.parents:
            candidate = parent / "grammar" / "loopwise.lark"
            if candidate.is_file():
                return candidate.read_text("utf-8")
        raise


def build_parser(text: str | None = None) -> Lark:
    """The parser built from the grammar (no cache of any kind)."""
    return Lark(grammar_text() if text is None else text, **_OPTIONS)


def shipped_tables(text: str | None = None) -> dict | None:
    """The shipped tables (the dict `Lark.load` takes) when they fit, else None."""
    try:
        raw = resources.files("loopwise.language").joinpath(TABLES_FILE.name).read_text("utf-8")
        shipped = json.loads(raw, object_hook=_decode)
    except (OSError, ValueError, ModuleNotFoundError):
        return None
    if shipped.get("lark_version") != lark.__version__ or \
            shipped.get("grammar") != (grammar_text() if text is None else text):
        return None
    return shipped["tables"]


def load_parser() -> Lark:
    """The parser from the shipped tables when they fit this grammar and lark, else built."""
    text = grammar_text()
    tables = shipped_tables(text)
    if tables is None:
        return build_parser(text)
    # Lark.load takes the dict that Lark.save would pickle: the same data, no pickle
    return Lark.load(tables)


def tables_json() -> str:
    """The text of `lalr_tables.json` for the current grammar and lark version."""
    from lark.grammar import Rule
    from lark.lexer import TerminalDef

    text = grammar_text()
    data, memo = build_parser(text).memo_serialize([TerminalDef, Rule])
    tables = {"data": data, "memo": memo}
    out = json.dumps({"generated_by": "python -m loopwise.language.tables (do not edit)",
                      "lark_version": lark.__version__, "grammar": text,
                      "tables": _encode(tables)}, separators=(",", ":"))
    if json.loads(out, object_hook=_decode)["tables"] != tables:  # the encoding must round-trip
        raise AssertionError("the parser tables do not survive the JSON encoding")
    return out + "\n"


# JSON has no tuples and only string keys: both are tagged, one key each
def _encode(x):
    if isinstance(x, dict):
        if all(isinstance(k, str) and k not in ("~t", "~d") for k in x):
            return {k: _encode(v) for k, v in x.items()}
        return {"~d": [[_encode(k), _encode(v)] for k, v in x.items()]}
    if isinstance(x, tuple):
        return {"~t": [_encode(v) for v in x]}
    if isinstance(x, list):
        return [_encode(v) for v in x]
    if x is None or isinstance(x, (str, int, float, bool)):
        return x
    raise TypeError(f"cannot ship a {type(x).__name__} in the parser tables")


def _decode(d: dict):
    if len(d) == 1 and "~t" in d:
        return tuple(d["~t"])
    if len(d) == 1 and "~d" in d:
        return {k: v for k, v in d["~d"]}
    return d


def main() -> None:
    """`python -m loopwise.language.tables`: write the tables of the current grammar to `TABLES_FILE`."""
    TABLES_FILE.write_text(tables_json(), encoding="utf-8")
    print(f"wrote {TABLES_FILE}")


if __name__ == "__main__":
    main()

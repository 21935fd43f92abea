"""Text -> syntax tree (lark), with lark's errors turned into located ModelErrors.

Names are not checked here: lark wraps exceptions raised in callbacks, so the
tree is built first and checked in a separate pass (`resolve`).
"""
from __future__ import annotations

import functools
import math
import re

from lark import Lark, Token, Transformer, Tree, v_args
from lark.exceptions import UnexpectedCharacters, UnexpectedInput, UnexpectedToken

from ..errors import ModelError, Span
from . import ast
from .hints import closest
from .source import MAX_MODEL_BYTES
from .tables import grammar_text, load_parser
from .units import to_si

__all__ = ["parse_text", "grammar_text", "MAX_MODEL_BYTES", "MAX_NESTING", "MAX_TOKENS", "RESERVED",
           "STATEMENT_WORDS", "count_tokens"]

#: deeper expressions are refused: the tree walks below recurse once per level
MAX_NESTING = 200

#: a model and the files it uses may hold at most this many tokens together (names,
#: numbers, operators, quoted paths, comments and line ends; about 2,000 lines of a dense
#: model), counted before parsing: it bounds the time and memory of reading any input
MAX_TOKENS = 20_000


def _reserved_words(grammar: str) -> tuple[str, ...]:
    """The words the grammar's NAME never matches: read from the grammar, the one place
    they are listed (a statement word added to the grammar is reserved here too)."""
    m = re.search(r"^NAME:\s*/\(\?!\(\?:([\w|]+)\)", grammar, flags=re.M)
    if m is None:
        raise RuntimeError("grammar/loopwise.lark: NAME no longer lists the reserved words")
    return tuple(m.group(1).split("|"))


#: words the grammar never accepts as a name: the statement words and `at`, `in`
RESERVED = frozenset(_reserved_words(grammar_text()))
#: the words that start a statement, in the grammar's order (a misspelt one gets a hint)
STATEMENT_WORDS = tuple(w for w in _reserved_words(grammar_text()) if w not in ("at", "in"))

_UNITS = ("ns", "us", "ms", "min", "h", "Hz", "kHz", "deg", "rad", "dB")
_GENERIC_HINT = ("one statement per line: " + ", ".join(STATEMENT_WORDS) +
                 " or `signal = ...`; see docs/language.md")

_NUMBER = re.compile(
    r"(?P<num>(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?)(?P<unit>kHz|Hz|min|ms|us|ns|h|deg|rad|dB|%)?$"
)
#: a plain number at the end of a text (what a unit or a `*` would follow)
_TRAILING_NUMBER = re.compile(r"(?<![\w.])((\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?)$")

#: what the token budget counts: every lexeme the parser sees, comments and line ends too
_LEXEME = re.compile(r'#[^\n]*|"[^"\n]*"?|(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[\w%]*|\w+|->|>=|<=|\n|\S')


@functools.lru_cache(maxsize=1)
def _parser() -> Lark:
    # the LALR tables ship in the package (tables.py): no cache file is read from a shared folder
    return load_parser()


def count_tokens(text: str, limit: int) -> tuple[int, int | None]:
    """(tokens counted, offset of the first token past `limit` or None); stops there."""
    n = 0
    for m in _LEXEME.finditer(text):
        if n == limit:
            return n, m.start()
        n += 1
    return n, None


class _ToAst(Transformer):
    def __init__(self, file: str):
        super().__init__()
        self.file = file

    def _span(self, item) -> Span:
        if isinstance(item, Token):
            return Span(self.file, item.line or 0, item.column or 0, item.end_column)
        meta = item.meta if isinstance(item, Tree) else item
        if getattr(meta, "empty", True):
            return Span(self.file, 0, 0)
        end = meta.end_column if meta.end_line == meta.line else None
        return Span(self.file, meta.line, meta.column, end)

    # --- expressions ---
    @v_args(meta=True)
    def number(self, meta, children):
        tok = children[0]
        m = _NUMBER.match(str(tok))
        raw = float(m.group("num"))
        unit = m.group("unit")
        try:
            value = to_si(raw, unit)
        except OverflowError:  # e.g. 1e300dB: reported as out of range below
            value = math.inf
        return ast.Number(self._span(tok), value, unit, str(tok))

    def name(self, children):
        tok = children[0]
        return ast.Name(self._span(tok), str(tok))

    @v_args(meta=True)
    def binop(self, meta, children):
        left, op, right = children
        return ast.BinOp(self._span(meta), str(op), left, right)

    @v_args(meta=True)
    def neg(self, meta, children):
        return ast.Neg(self._span(meta), children[-1])

    def pos(self, children):
        return children[-1]

    @v_args(meta=True)
    def power(self, meta, children):
        base, _, exponent = children
        return ast.Power(self._span(meta), base, exponent)

    @v_args(meta=True)
    def call(self, meta, children):
        tok, arg = children
        return ast.Call(self._span(meta), str(tok), self._span(tok), arg)

    @v_args(meta=True)
    def inline(self, meta, children):
        transfer, arg = children
        return ast.Inline(self._span(meta), transfer, arg)

    # --- statements ---
    @v_args(meta=True)
    def model_stmt(self, meta, children):
        return ast.ModelStmt(self._span(meta), str(children[0]))

    @v_args(meta=True)
    def use_stmt(self, meta, children):
        return ast.UseStmt(self._span(children[0]), str(children[0])[1:-1])

    @v_args(meta=True)
    def param_stmt(self, meta, children):
        name = children[0]
        low = high = None
        if len(children) == 4:
            low, high = children[2], children[3]
        return ast.ParamStmt(self._span(name), str(name), children[1], low, high)

    @v_args(meta=True)
    def input_stmt(self, meta, children):
        return ast.InputStmt(self._span(meta), tuple((str(t), self._span(t)) for t in children))

    @v_args(meta=True)
    def block_stmt(self, meta, children):
        return ast.BlockStmt(self._span(children[0]), str(children[0]), children[1])

    @v_args(meta=True)
    def equation(self, meta, children):
        return ast.EquationStmt(self._span(children[0]), str(children[0]), children[1])

    @v_args(meta=True)
    def break_stmt(self, meta, children):
        name, signal = children[0], children[1]
        target = children[3] if len(children) == 4 else None
        return ast.BreakStmt(
            self._span(name), str(name), str(signal), self._span(signal),
            None if target is None else str(target),
            None if target is None else self._span(target),
        )

    @v_args(meta=True)
    def require_stmt(self, meta, children):
        target, metric, op, value = children
        return ast.RequireStmt(
            self._span(meta), str(target), self._span(target), str(metric),
            self._span(metric), str(op), value,
        )

    @v_args(meta=True)
    def waive_stmt(self, meta, children):
        code, rest = children[0], list(children[1:])
        reason = rest.pop() if rest and rest[-1].type == "STRING" else None
        at = rest[0] if rest else None
        return ast.WaiveStmt(
            self._span(meta), str(code), self._span(code),
            None if at is None else str(at), None if at is None else self._span(at),
            None if reason is None else str(reason)[1:-1], None if reason is None else self._span(reason),
        )

    def start(self, children):
        return tuple(children)


_TOKEN_WORDS = {
    "NAME": "a name", "NUMBER": "a number", "_NL": "end of line", "LPAR": "`(`",
    "RPAR": "`)`", "LSQB": "`[`", "RSQB": "`]`", "EQUAL": "`=`", "PLUS": "`+`",
    "MINUS": "`-`", "TIMES": "`*`", "DIVIDE": "`/`", "CARET": "`^`", "COMMA": "`,`",
    "STRING": "a quoted path", "COMPARE": "a comparison (>= <= > <)", "ARROW": "`->`",
    "STAR": "`*`", "_IN": "`in`", "$END": "end of file",
}


def _token_word(name: str) -> str:
    if name in _TOKEN_WORDS:
        return _TOKEN_WORDS[name]
    word = name.lower().lstrip("_")
    return f"`{word}`" if word in RESERVED else word


def _expected(names) -> str:
    words = sorted({_token_word(n) for n in names})
    if len(words) > 6:
        return ""
    return "expected " + ", ".join(words)


def _statement_word(text: str) -> str:
    m = re.match(r"\s*([A-Za-z_]\w*)", text)
    return m.group(1) if m else ""


def _misspelt_statement(prev: str, span: Span) -> ModelError | None:
    """`blok B = ...`: a first word close to a statement word, and the parse failed right after it."""
    m = re.fullmatch(r"(\s*)([A-Za-z_]\w*)\s*", prev)
    if m is None or m.group(2) in RESERVED:
        return None
    word = m.group(2)
    match = closest(word, STATEMENT_WORDS)
    if match is None:
        return None
    col = len(m.group(1)) + 1
    return ModelError("LW101", f"unknown statement `{word}`", Span(span.file, span.line, col, col + len(word)),
                      f"did you mean `{match}`?")


def _no_s_unit(number: str, suffix: str, span: Span) -> ModelError:
    """`param Td = 5e-3 s`: in a constant, `s` can only have been meant as seconds."""
    forms = [f"`{number}`"]
    value = float(number)
    for scale, unit in ((1e-3, "ms"), (1e-6, "us"), (1e-9, "ns")):
        if scale <= value < 1:
            forms.append(f"`{value / scale:.12g}{unit}`")
            break
    return ModelError("LW103", f"there is no unit `{suffix}`", span,
                      "plain numbers are seconds: write " + " or ".join(forms))


def _unexpected_token(tok: Token, prev: str, exc, span: Span) -> ModelError:
    word = str(tok)
    if word in RESERVED:
        return ModelError("LW101", f"`{word}` is a reserved word", span,
                          f"`{word}` cannot name a param, block, signal or break; choose another name")
    misspelt = _misspelt_statement(prev, span)
    if misspelt is not None:
        return misspelt
    number = _TRAILING_NUMBER.search(prev)
    if tok.type == "NAME" and word == "s" and number and _statement_word(prev) in ("param", "require"):
        return _no_s_unit(number.group(1), word, span)
    if tok.type == "NAME" and word in _UNITS and number:
        return ModelError("LW102", f"a space between `{number.group(1)}` and its unit `{word}`", span,
                          f"write the unit right after the number: `{number.group(1)}{word}`")
    operand_done = bool({"TIMES", "DIVIDE", "PLUS", "MINUS", "CARET"} & set(exc.expected))
    if operand_done and tok.type in ("NAME", "NUMBER", "LPAR", "LSQB") and re.search(r"[\w.)\]]$", prev):
        m = number or re.search(r"([\w.]+|\))$", prev)
        left = m.group(1) if m else ""
        right = {"(": "(...)", "[": "[...]"}.get(word, word)
        return ModelError("LW102", f"missing operator before `{word}`", span,
                          f"multiplication is always written with `*`: `{left}*{right}`")
    what = {"NAME": "name ", "NUMBER": "number "}.get(tok.type, "")
    return ModelError("LW101", f"unexpected {what}`{word}`", span,
                      _expected(exc.expected) or _GENERIC_HINT)


def _unexpected_character(src: str, ch: str, line: int, col: int, file: str) -> ModelError:
    span = Span(file, line, col, col + 1)
    if ch == '"':
        return ModelError("LW101", "a quoted path is not closed", Span(file, line, col, len(src) + 1),
                          'write the path in double quotes on one line: use "common/drive.loop"')
    if ch == "\r":
        return ModelError("LW104", "a carriage return without a line feed", span,
                          "save the file with LF or CRLF line ends")
    if ch == "\ufffd" or (ch and not ch.isprintable()):
        return ModelError("LW104", "the file is not readable text here", span, "a model is plain UTF-8 text")
    if ch.isalpha():
        return ModelError("LW101", f"unexpected character `{ch}`", span,
                          "names use the ASCII letters A-Z a-z, digits and `_`")
    if ch == "%":
        return ModelError("LW102", "a space before `%`", span,
                          "write the unit right after the number: `5%`")
    return ModelError("LW101", f"unexpected character `{ch}`", span,
                      "operators are + - * / ^, comparisons >= <= > <, comments start with #")


def _syntax_error(exc: UnexpectedInput, text: str, file: str) -> ModelError:
    line = getattr(exc, "line", 0) or 0
    col = getattr(exc, "column", 0) or 0
    lines = text.splitlines()
    src = lines[line - 1] if 0 < line <= len(lines) else ""
    hint = None
    if isinstance(exc, UnexpectedToken):
        tok = exc.token
        prev = src[: col - 1].rstrip()
        end = col + len(str(tok)) if tok.type != "$END" else None
        span = Span(file, line, col, end)
        if tok.type in ("_NL", "$END"):
            msg = "the statement ends too early"
            exp = _expected(exc.expected)
            return ModelError("LW101", msg, Span(file, line, max(col, 1)), exp or _GENERIC_HINT)
        return _unexpected_token(tok, prev, exc, span)
    if isinstance(exc, UnexpectedCharacters):
        span = Span(file, line, col, col + 1)
        rest = src[col - 1:]
        m = re.match(r"(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?([A-Za-z_]\w*)", rest)
        if m:
            suffix = m.group(4)
            number = rest[: m.start(4)]
            if suffix[0] in "_eE" or (number == "0" and suffix[0] in "xXbBoO"):
                return ModelError("LW103", f"malformed number `{m.group(0)}`",
                                  Span(file, line, col, col + len(m.group(0))),
                                  "numbers look like 12, 0.5, 1e-3 or 150us (no `_` separators, no hex)")
            if suffix.startswith("s") and _statement_word(src) in ("param", "require"):
                return _no_s_unit(number, suffix, Span(file, line, col, col + len(m.group(0))))
            if suffix == "s" or suffix.startswith("s"):
                hint = f"write `{number}*{suffix}`: `s` is the Laplace variable, not a unit (plain numbers are seconds)"
                return ModelError("LW102", f"missing `*` between `{number}` and `{suffix}`", Span(file, line, col, col + len(m.group(0))), hint)
            hint = ("units are ns us ms min h Hz kHz deg rad dB %, written right after the number; "
                    f"for a product write `{number}*{suffix}`")
            return ModelError("LW103", f"unknown unit or missing `*` in `{m.group(0)}`", Span(file, line, col, col + len(m.group(0))), hint)
        if re.match(r"\d", rest[:1]):
            return ModelError("LW103", "malformed number", span, "numbers look like 12, 0.5, 1e-3 or 150us")
        pos = getattr(exc, "pos_in_stream", None)
        ch = text[pos] if pos is not None and pos < len(text) else rest[:1]
        return _unexpected_character(src, ch, line, col, file)
    return ModelError("LW101", "syntax error", Span(file, line, col), _GENERIC_HINT)


def parse_text(text: str, file: str = "<text>", tokens_left: int | None = None) -> ast.ModelFile:
    """Parse one model file's text into its syntax tree (includes unresolved).

    `tokens_left` is what remains of the token budget of a model that includes
    this file (None: a file on its own, `MAX_TOKENS`).
    """
    if len(text) > MAX_MODEL_BYTES:
        raise ModelError(
            "LW105", f"the model is too large ({len(text) // 1024} KiB; the limit is {MAX_MODEL_BYTES // 1024 // 1024} MiB)",
            Span(file, 1, 1), "split it into files joined with `use`",
        )
    if "\x00" in text:
        line = text.count("\n", 0, text.index("\x00")) + 1
        raise ModelError("LW104", "the file holds binary data, not model text", Span(file, line, 1),
                         "a model is plain UTF-8 text")
    text = text.removeprefix("\ufeff")  # a byte-order mark some editors write
    tokens, over = count_tokens(text, MAX_TOKENS if tokens_left is None else max(tokens_left, 0))
    if over is not None:
        raise _too_many_tokens(text, over, file, tokens_left is not None)
    try:
        tree = _parser().parse(text + "\n")
    except UnexpectedInput as exc:
        raise _syntax_error(exc, text, file) from None
    deep = _too_deep(tree)
    if deep is not None:
        raise ModelError("LW107", f"the expression is nested more than {MAX_NESTING} levels deep",
                         Span(file, deep.meta.line, deep.meta.column),
                         "split it with params, blocks or intermediate signals")
    statements = _ToAst(file).transform(tree)
    for stmt in _numbers(statements):
        if not math.isfinite(stmt.value) or (stmt.value == 0.0 and re.match(r"[0.]*[1-9]", stmt.text)):
            raise ModelError("LW106", f"the number `{stmt.text}` is out of range", stmt.span,
                             "numbers must be finite and within about 1e-300 to 1e300")
    return ast.ModelFile(file, statements, tokens)


def _too_many_tokens(text: str, offset: int, file: str, included: bool) -> ModelError:
    line = text.count("\n", 0, offset) + 1
    col = offset - (text.rfind("\n", 0, offset) + 1) + 1
    whose = "the model and the files it uses hold" if included else "the file holds"
    return ModelError("LW108", f"too large to read: {whose} more than {MAX_TOKENS:,} tokens",
                      Span(file, line, col),
                      f"a model with its included files may hold {MAX_TOKENS:,} tokens (names, numbers, "
                      "operators, comments and line ends); check its loops as separate models")


def _too_deep(tree: Tree) -> Tree | None:
    """The first subtree deeper than MAX_NESTING (iterative, so it cannot overflow)."""
    stack = [(tree, 0)]
    while stack:
        node, depth = stack.pop()
        if depth > MAX_NESTING:
            return node
        stack.extend((c, depth + 1) for c in node.children if isinstance(c, Tree))
    return None


def _numbers(node):
    """Every Number literal under a node (iterative: deep trees do not recurse)."""
    stack = [node]
    while stack:
        n = stack.pop()
        if isinstance(n, ast.Number):
            yield n
        elif isinstance(n, tuple):
            stack.extend(n)
        elif hasattr(n, "__dataclass_fields__"):
            for f in n.__dataclass_fields__:
                v = getattr(n, f)
                if isinstance(v, (ast.Expr, ast.Statement, tuple)):
                    stack.append(v)

"""One helper per output format that makes a user-controlled string safe to show.

File names, model, break, signal and block names, messages that quote them and
hints all come from the user's files and folders; none of them may drive a
terminal, end a Markdown code span or table cell, or make XML not well-formed.
Every reporter passes such text through the helper of its format:

- terminal and plain text: `loopwise.errors.printable` (control characters,
  line and paragraph separators and bidirectional overrides become `?`), and
  `one_line` for a name or message that must stay on its line;
- Markdown: `md_text` (running text), `md_code` (a code span), `md_cell` (a table
  cell), `md_fence` (a fenced block that nothing inside can close);
- XML (HTML and JUnit): `xml_text` (characters XML 1.0 cannot carry removed; the
  XML writer or `html_text` escapes the markup characters);
- JSON and SARIF: `json_dumps`. JSON's own escaping covers only U+0000-U+001F;
  DEL, the C1 controls, the line separators and the bidirectional controls
  would stand raw in the file (a `cat` of the report could act on them), so they
  are written as `\\uXXXX` escapes too. The data is unchanged.
"""
from __future__ import annotations

import json
import re
from html import escape

from ..errors import printable

__all__ = ["printable", "one_line", "md_text", "md_code", "md_cell", "md_fence", "xml_text", "html_text",
           "json_dumps"]

_BACKTICKS = re.compile("`+")

#: characters with a meaning in Markdown's inline syntax (emphasis, code, links and
#: images, raw HTML and entities, tables, strikethrough) or that close a heading
_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>#|~&])")


def one_line(text) -> str:
    """A user string terminal-safe and on one line: a newline in a name becomes `?`
    like any other control character, so it cannot start a new line of a table or a
    new Markdown block. The plain-text formats show every user string through it."""
    return printable(str(text), keep="")


def md_text(text: str) -> str:
    """Running Markdown text that shows `text` literally: every character with an
    inline meaning is backslash-escaped, so no link, image, HTML tag or heading
    can be made from it."""
    return _MD_SPECIAL.sub(r"\\\1", one_line(text))


def md_code(text: str, cell: bool = False) -> str:
    """`text` as one code span: the fence is one backtick longer than any run inside,
    padded with a space when the text starts or ends with a backtick. In a table
    cell (`cell=True`) a pipe is escaped as the table syntax requires (the table
    reads `\\|` inside a code span as a literal pipe)."""
    text = one_line(text)
    if cell:
        text = text.replace("|", "\\|")
    longest = max((len(m) for m in _BACKTICKS.findall(text)), default=0)
    fence = "`" * (longest + 1)
    pad = " " if text.startswith("`") or text.endswith("`") or not text.strip() else ""
    return f"{fence}{pad}{text}{pad}{fence}"


def md_cell(text: str) -> str:
    """A table cell written by the reporter itself (status words, numbers): one
    line, pipes escaped. User text in a cell goes through `md_code` or `md_text`."""
    return one_line(text).replace("\\", "\\\\").replace("|", "\\|")


def md_fence(lines: list[str], info: str = "text") -> list[str]:
    """A fenced code block whose fence is longer than any backtick run inside it."""
    clean = [printable(line) for line in lines]
    longest = max((len(m) for line in clean for m in _BACKTICKS.findall(line)), default=0)
    fence = "`" * max(3, longest + 1)
    return [fence + info, *clean, fence]


#: characters XML 1.0 cannot carry at all (control characters other than tab, LF,
#: CR; surrogates; the two non-characters at the end of the basic plane)
_NOT_XML = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ud800-\udfff\ufffe\uffff]")


def xml_text(text: str) -> str:
    """Text an XML 1.0 document can carry, and that no terminal would act on:
    control characters become `?` (`printable`), then what XML cannot carry at all
    (lone surrogates of undecodable file-name bytes) becomes U+FFFD. The XML
    writer (ElementTree) or `html_text` escapes `<`, `&` and quotes."""
    return _NOT_XML.sub("\ufffd", printable(str(text), keep="\t\n"))


def html_text(text) -> str:
    """`text` for an HTML page that is also well-formed XML: `xml_text`, then
    `<`, `>`, `&` and both quotes escaped."""
    return escape(xml_text(str(text)), quote=True)


#: what JSON leaves raw but a terminal or an editor may act on (see `printable`)
_JSON_RAW = re.compile("[\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")


def json_dumps(doc) -> str:
    """`doc` as indented JSON text (UTF-8 kept readable) with every control and
    bidirectional character escaped; not-a-number and infinities refused (the
    contracts write them as null)."""
    text = json.dumps(doc, indent=2, ensure_ascii=False, allow_nan=False)
    # these characters can only stand inside JSON strings, where `\uXXXX` means the same
    return _JSON_RAW.sub(lambda m: f"\\u{ord(m.group()):04x}", text) + "\n"

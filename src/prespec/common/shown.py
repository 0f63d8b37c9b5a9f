"""How text from plans and data leaves prespec: nothing in it acts on the reader's tools or hides.

Labels, titles, reasons and data values are the user's text. Wherever prespec writes them for
a reader they pass through one of these:

- :func:`visible`: control characters (terminal escape sequences, NUL, line and paragraph
  separators) and the bidirectional controls U+202A–U+202E and U+2066–U+2069 shown as
  ``\\xNN`` / ``\\uNNNN``, so that no label clears a screen, hides what follows it or reads
  backwards. Tab and line breaks stay (the report wraps them; a console line escapes them).
- :func:`console`: one line for the terminal: :func:`visible`, and tab and line breaks escaped
  too, so user text can neither act on the terminal nor forge a line of prespec's own.
- :func:`csv_writer`: a ``csv.writer`` whose text cells are :func:`visible` and, when they
  begin with ``=``, ``+``, ``-``, ``@``, tab or carriage return, start with an apostrophe, the
  usual way to keep a spreadsheet from reading a cell as a formula (common practice, as in
  OWASP's advice on CSV injection). Numbers, and text that is a plain decimal number, are written unchanged.
- :func:`json_text`: JSON with the bidirectional controls, the C1 controls and the line and
  paragraph separators written as ``\\uNNNN`` escapes (JSON already escapes C0 controls and
  NUL): the raw file shows them, and a JSON reader gets the same values back.
"""

from __future__ import annotations

import csv
import json
import re
from collections.abc import Iterable
from typing import Any, TextIO

#: C0 and C1 controls other than tab and line breaks, the line and paragraph separators,
#: and the bidirectional embedding, override and isolate controls.
_HIDDEN = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e"
                     r"\u2066-\u2069]")
#: The same, with tab and line breaks: nothing of these belongs inside one console line.
_CONSOLE = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
#: What :func:`json_text` escapes beyond what ``json.dumps`` does (it escapes U+0000–U+001F).
_JSON_HIDDEN = re.compile(r"[\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069]")
_NAMED = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}


def _escape(match: re.Match[str]) -> str:
    char = match.group()
    if char in _NAMED:
        return _NAMED[char]
    code = ord(char)
    return f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}"


def visible(value: str) -> str:
    """``value`` with each hidden character (not tab or a line break) as ``\\xNN``/``\\uNNNN``."""
    return _HIDDEN.sub(_escape, value)


def console(value: object) -> str:
    """``value`` as text for one console line: every control and bidi character escaped."""
    return _CONSOLE.sub(_escape, str(value))


def console_lines(text: str) -> str:
    """Several lines for the console: each line as :func:`console`, the line breaks kept."""
    return "\n".join(console(line) for line in text.split("\n"))


#: The first characters a spreadsheet reads as the start of a formula (or a cell break).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
_PLAIN_NUMBER = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def cell(value: object) -> object:
    """One CSV cell: a number or None unchanged; text visible and never a formula."""
    if value is None or isinstance(value, bool | int | float):
        return value
    text = visible(str(value))
    if text.startswith(FORMULA_START) and not _PLAIN_NUMBER.fullmatch(text):
        return "'" + text
    return text


class _CellWriter:
    """``csv.writer`` with every cell passed through :func:`cell`."""

    def __init__(self, fh: TextIO) -> None:
        self._writer = csv.writer(fh)

    def writerow(self, row: Iterable[object]) -> Any:
        return self._writer.writerow([cell(v) for v in row])

    def writerows(self, rows: Iterable[Iterable[object]]) -> None:
        for row in rows:
            self.writerow(row)


def csv_writer(fh: TextIO) -> _CellWriter:
    """The writer of every CSV prespec writes (report tables, families, data dictionary)."""
    return _CellWriter(fh)


def json_text(doc: Any, **options: Any) -> str:
    """``json.dumps(doc, ensure_ascii=False, **options)`` with hidden characters as escapes.

    JSON text holds such characters only inside strings, so writing each as its ``\\uNNNN``
    escape changes no value: ``json.loads`` of the result equals ``json.loads`` of the raw form.
    """
    text = json.dumps(doc, ensure_ascii=False, **options)
    if text.isascii() and "\x7f" not in text:  # the usual case, at the cost of two scans in C
        return text
    return _JSON_HIDDEN.sub(lambda m: f"\\u{ord(m.group()):04x}", text)

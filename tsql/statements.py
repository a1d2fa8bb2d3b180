"""SQL text split into statements at the semicolons that end them (quotes, dollar quotes and comments understood)."""

from __future__ import annotations

import bisect
import re
from dataclasses import dataclass

_DOLLAR_TAG = re.compile(r"\$(?:[A-Za-z_][A-Za-z0-9_]*)?\$")


@dataclass(frozen=True)
class Statement:
    """One SQL statement: its text from its first token up to (not including) the closing ``;``."""

    text: str
    line: int
    """1-based line of the statement's first token."""
    complete: bool
    """Closed by a ``;`` (only the last statement of a text can be open)."""


def split_statements(text: str) -> list[Statement]:
    """Split SQL text at the semicolons that end statements.

    A ``;`` inside a quoted string or identifier, a dollar-quoted string, a
    ``--`` comment or a (nested) ``/* */`` comment does not end a statement.
    Empty statements and comment-only stretches are dropped. A trailing
    statement without ``;``, or text ending inside a string or comment, is
    returned with ``complete=False``.
    """
    newlines = [i for i, c in enumerate(text) if c == "\n"]
    statements: list[Statement] = []
    start: int | None = None
    i, n = 0, len(text)
    while i < n:
        c = text[i]
        if c == ";":
            if start is not None:
                statements.append(Statement(text[start:i].rstrip(), bisect.bisect(newlines, start) + 1, True))
            start = None
            i += 1
        elif c.isspace():
            i += 1
        elif text.startswith("--", i):
            end = text.find("\n", i)
            i = n if end < 0 else end
        else:
            end = _end_of_block(text, i) if text.startswith("/*", i) else None
            if end is None:  # not a comment: code starts here
                start = i if start is None else start
                end = _end_of_token(text, i)
            elif end > n and start is None:  # an unterminated comment
                start = i
            i = end
    if start is not None:
        statements.append(Statement(text[start:].rstrip(), bisect.bisect(newlines, start) + 1, False))
    return statements


def _end_of_block(text: str, i: int) -> int:
    """Index after the ``*/`` closing the comment at ``i`` (nested comments count); past the end if unclosed."""
    depth = 0
    while i < len(text):
        if text.startswith("/*", i):
            depth, i = depth + 1, i + 2
        elif text.startswith("*/", i):
            depth, i = depth - 1, i + 2
            if depth == 0:
                return i
        else:
            i += 1
    return len(text) + 1


def _end_of_token(text: str, i: int) -> int:
    """Index after the quoted string or identifier starting at ``i``, or ``i + 1`` for any other character."""
    c = text[i]
    before = text[i - 1] if i else " "
    if c in "'\"":
        backslash = c == "'" and before in "eE" and (i < 2 or not _is_word(text[i - 2]))
        j = i + 1
        while j < len(text):
            if backslash and text[j] == "\\":
                j += 2
            elif text[j] == c:
                if not text.startswith(c, j + 1):  # a doubled quote stands for itself
                    return j + 1
                j += 2
            else:
                j += 1
        return len(text) + 1
    if c == "$" and not _is_word(before):
        tag = _DOLLAR_TAG.match(text, i)
        if tag:
            close = text.find(tag.group(), tag.end())
            return len(text) + 1 if close < 0 else close + len(tag.group())
    return i + 1


def _is_word(c: str) -> bool:
    return c.isalnum() or c in "_$"

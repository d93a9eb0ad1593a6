"""Plan text made harmless for where it goes.

A plan is untrusted text. Shown on a terminal, in a ticket or on a page, a control character
(an ESC sequence, a carriage return) or a direction override (U+202E) can rewrite what the
reader sees; written into a generated SQL comment, a line break ends the comment and the rest
runs. Here such characters become visible escapes (``\\x1b``, ``\\u202e``) and SQL comment
text becomes one bounded line. Identifier quoting is engine knowledge and lives in the engine
modules; they refuse a name through `UnquotableName`.
"""

from __future__ import annotations

COMMENT_LIMIT = 200
"""Characters of plan text one SQL comment carries; longer text is cut and says so."""


class UnquotableName(ValueError):
    """A name from the plan that generated SQL will not carry (control characters, too long)."""

    def __init__(self, name: str, why: str):
        self.name = name
        self.why = why
        super().__init__(f"the name {visible(name)[:COMMENT_LIMIT]!s} {why}")


def _escape(ch: str) -> str:
    code = ord(ch)
    if code < 0x100:
        return f"\\x{code:02x}"
    if code < 0x10000:
        return f"\\u{code:04x}"
    return f"\\U{code:08x}"


def visible(text: str, keep: str = "") -> str:
    """`text` with every character a display could act on (C0/C1 controls, ESC, direction
    marks and overrides, line and paragraph separators, zero-width and other format
    characters, lone surrogates) written as a visible escape; the characters in `keep`
    (a line break in a code block) stay."""
    text = str(text)
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() or ch in keep else _escape(ch) for ch in text)


def comment_text(text: str, limit: int = COMMENT_LIMIT) -> str:
    """Plan text for the inside of a ``--`` comment: one line (every line break escaped,
    so the comment cannot end early), bounded in length."""
    shown = visible(text)
    if len(shown) > limit:
        shown = shown[:limit] + f"... ({len(shown) - limit:,} more characters left out)"
    return shown


def check_name(name: str, *, max_bytes: int | None = None, max_chars: int | None = None,
               engine: str = "the engine") -> str:
    """`name` if generated SQL may carry it inside the engine's identifier quotes, else
    `UnquotableName`: empty, holding a character that is not printable, or longer than the
    engine's names can be (so it cannot be a real name)."""
    if not name:
        raise UnquotableName(name or "", "is empty")
    if not name.isprintable():
        raise UnquotableName(name, "holds control, line-break or direction characters")
    if max_chars is not None and len(name) > max_chars:
        raise UnquotableName(name, f"is longer than {engine}'s {max_chars}-character names")
    if max_bytes is not None and len(name.encode("utf-8", "replace")) > max_bytes:
        raise UnquotableName(name, f"is longer than {engine}'s {max_bytes}-byte names")
    return name


def refused_fix(exc: UnquotableName) -> str:
    """The fix text when a name cannot be written into SQL: comments only."""
    return ("-- planview writes no SQL for this finding: the plan names a table or column that "
            f"{exc.why}:\n-- {comment_text(exc.name)}\n"
            "-- Check where the plan came from; write the statement yourself if the name is real.")

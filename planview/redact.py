"""Passwords out of every message planview prints, for every connection-string form it meets.

Drivers quote the connection string, or a piece of it, in their errors: libpq writes the
whole URI when it cannot parse a host (``postgresql://user:secret@[bad/db``) and just the
password when its percent-encoding is bad (``"s%zz"``). So a message is cleaned twice: every
secret found in the connection string the user gave is masked wherever it appears, however
little of the string around it the message kept, and anything shaped like a credential
(``password=...``, ``scheme://user:pw@``, ``?password=``, tokens) is masked as well.

Forms: libpq key=value (``password=pw``, ``password='p w'`` with ``\\'`` escapes,
``sslpassword``), URIs of PostgreSQL, MySQL and MariaDB drivers (``scheme://user:pw@host``,
including malformed ones, and ``?password=`` in the query), ODBC-style ``PWD=pw;``, and
MotherDuck's ``motherduck_token``. A DuckDB path holds no secret.

>>> redact("cannot parse postgresql://ann:s3cret@[bad/db")
'cannot parse postgresql://ann:********@[bad/db'
>>> redact('invalid percent-encoded token: "s%zz"', "postgresql://ann:s%zz@h/db")
'invalid percent-encoded token: "********"'
"""

from __future__ import annotations

import re
from urllib.parse import unquote

MASK = "********"

_SCHEME = re.compile(r"(?i)\s*[a-z][a-z0-9+.\-]*://")
_URI_USERINFO = re.compile(r"""(?i)\b([a-z][a-z0-9+.\-]*://[^\s:/?#@'"]*:)([^\s'"]*)@""")
_KEY = r"(?:ssl)?password|passwd|pwd|secret|(?:motherduck_)?token|api[_-]?key"
_CREDENTIAL = re.compile(
    rf"""(?ix)(?<![a-z0-9_])({_KEY})(\s*=\s*|['"]\s*:\s*)"""
    r"""('(?:[^'\\]|\\.)*'?|"(?:[^"\\]|\\.)*"?|[^\s&;,'")\]}]+)""")
_SHORT = 4


def secrets_in(conninfo: str | None) -> tuple[str, ...]:
    """Every form of every secret in a connection string: as written, unquoted, decoded.

    >>> secrets_in("host=db password='my \\\\'pw' user=ann")
    ("my \\\\'pw", "my 'pw")
    >>> secrets_in("/data/warehouse.duckdb")
    ()
    """
    if not conninfo:
        return ()
    found: list[str] = []
    scheme = _SCHEME.match(conninfo)
    if scheme:
        rest = conninfo[scheme.end():]
        if "@" in rest:
            userinfo = rest[:rest.rfind("@")]
            if ":" in userinfo:
                _add(found, userinfo.split(":", 1)[1])
    for match in _CREDENTIAL.finditer(conninfo):
        value = match.group(3)
        if value[:1] in ("'", '"'):
            inner = value[1:-1] if len(value) > 1 and value[-1] == value[0] else value[1:]
            _add(found, inner)
            _add(found, re.sub(r"\\(.)", r"\1", inner))
        else:
            _add(found, value)
    return tuple(found)


def _add(found: list[str], secret: str) -> None:
    for form in (secret, unquote(secret)):
        if form and form not in found:
            found.append(form)


def redact(text: str, *conninfos: str | None) -> str:
    """`text` with every secret of `conninfos`, and anything shaped like a credential, masked."""
    if not text:
        return text
    secrets = sorted({s for c in conninfos for s in secrets_in(c)}, key=len, reverse=True)
    for secret in secrets:
        if len(secret) >= _SHORT:
            text = text.replace(secret, MASK)
        else:  # a short secret is masked only where it stands alone, or the message is lost
            text = re.sub(rf"(?<![\w%]){re.escape(secret)}(?![\w%])", MASK, text)
    text = _URI_USERINFO.sub(lambda m: f"{m.group(1)}{MASK}@", text)
    return _CREDENTIAL.sub(lambda m: f"{m.group(1)}{m.group(2)}{MASK}", text)

"""Passwords out of anything printed: the one redaction of store locations and messages.

A store may be named by a URL with a password in its user-info
(``postgresql://user:pw@host/db``), in its query (``?password=pw``) or by a libpq keyword
string (``host=h password=pw``). :func:`redact` replaces every such password with
``***``. Every message, label, JSON field and report the store package makes goes
through it (``store/connection.py`` builds the printable store label with it), and the
command line's error handler passes every error line through it once more.

Standard library only, so the command line's error handler can use it without loading
SQLAlchemy.
"""

from __future__ import annotations

import re

MASK = "***"

# user-info: scheme://user:PASSWORD@ (SQLAlchemy reads a password as anything up to '@')
# (a password holding '@' runs on to the last '@' before the host)
_USERINFO = re.compile(r"(?i)\b([a-z][a-z0-9+.\-]*://[^:/@\s]*):([^@\n]*(?:@[^@\s]*(?=@))*)@")
# key=value where the key names a password: URL query, libpq keyword string, key: value
_KEYWORD = re.compile(
    r"""(?ix)
    (\b[a-z_]*(?:password|passwd|passphrase)[a-z_]*|\bpwd)   # the key
    (\s*[=:]\s*)                                             # = (or : in messages)
    ( '(?:\\.|[^'\\])*'? | "(?:\\.|[^"\\])*"? | [^\s&;,)'"]* )  # quoted or bare value
    """)


def redact(text: str) -> str:
    """``text`` with every password of a store URL or keyword string replaced by ``***``."""
    if not text:
        return text
    out = _USERINFO.sub(lambda m: f"{m.group(1)}:{MASK}@", text)
    return _KEYWORD.sub(
        lambda m: m.group(0) if m.group(3) in ("", MASK) else f"{m.group(1)}{m.group(2)}{MASK}",
        out)


def looks_like_keywords(text: str) -> bool:
    """Whether a store location is a libpq keyword string (``host=... dbname=...``)."""
    return "://" not in text and re.match(r"\s*[A-Za-z_]+\s*=", text) is not None

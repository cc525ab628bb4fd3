"""Secrets never reach a log line, an error message or a stored alert."""

from __future__ import annotations

import re

__all__ = ["redact"]

_URL_PASSWORD = re.compile(r"(://[^:/@\s]*:)[^@\s]*@")


def redact(text, secrets=()) -> str:
    """``text`` with URL passwords and the given secret strings replaced by ``***``."""
    text = _URL_PASSWORD.sub(r"\1***@", str(text))
    for secret in secrets:
        if secret:
            text = text.replace(secret, "***")
    return text

"""Database URLs in a configuration, and text taken from the environment.

Apart from the validators (``rules``) because a reader of the store alone — the dashboard,
which reads only the ``[store]`` table — needs these and nothing of pydantic.
"""

from __future__ import annotations

from pathlib import Path

from sqlalchemy.engine import make_url

__all__ = ["FromEnvironment", "database_url", "resolve_sqlite"]


class FromEnvironment(str):
    """Text that came (wholly or partly) from ``${NAME}``: shown as written in the file.

    It is the substituted value for every use, but its ``repr`` — which every message
    echoing a value uses — is the text of the file, so a secret never reaches an error.
    """

    def __new__(cls, value: str, written: str):
        text = super().__new__(cls, value)
        text.written = written
        return text

    def __repr__(self):
        return repr(self.written)


def database_url(value, folder: Path) -> str:
    """``value`` checked to be a database URL, a relative SQLite file made absolute against ``folder``.

    Raises ValueError with the problem in words to write after the key (``must be …``).
    """
    if not isinstance(value, str) or not value.strip():
        raise ValueError(f"must be a database URL; got {value!r}")
    try:
        parsed = make_url(value)
    except Exception:  # noqa: BLE001 - any parse failure is the same problem for the user
        raise ValueError("is not a database URL SQLAlchemy understands") from None
    return resolve_sqlite(parsed, str(value), folder)


def resolve_sqlite(parsed, url: str, folder: Path) -> str:
    """A relative SQLite file path made absolute against the configuration file's folder."""
    if not url.startswith("sqlite"):
        return url
    database = parsed.database
    if not database or database == ":memory:" or database.startswith("file:"):
        return url
    if Path(database).is_absolute():
        return url
    return parsed.set(database=str((folder / database).resolve())).render_as_string(hide_password=False)

"""Finding, reading and substituting the configuration file; writing TOML values.

The file is found from the argument, else ``$GAPWATCH_CONFIG``, else
``./gapwatch.toml``. Any string may use ``${NAME}`` to take a value from the
environment (secrets never live in the file). Relative SQLite paths in URLs are
resolved against the folder of the configuration file, so the service can be
started from anywhere.
"""

from __future__ import annotations

import os
import re
import tomllib
from pathlib import Path

from ..errors import ConfigError
from .model import Config

__all__ = ["load_config", "store_url_from_config", "toml_value"]

_ENV_REF = re.compile(r"\$\{([^}]*)\}")


def toml_value(value) -> str:
    """``value`` (bool, number, string, list or tuple of these) written as a TOML value.

    For the files gapwatch writes itself (the demo's configuration, test fixtures).
    """
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, str):
        return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {value!r} as TOML")


def _find_path(path, environ) -> Path:
    if path is not None:
        return Path(path)
    env_path = environ.get("GAPWATCH_CONFIG")
    if env_path:
        return Path(env_path)
    return Path("gapwatch.toml")


def load_config(path=None, environ=None) -> Config:
    """Read, substitute and validate the configuration file.

    Parameters
    ----------
    path : str or Path, optional
        The file; default ``$GAPWATCH_CONFIG``, else ``./gapwatch.toml``.
    environ : mapping, optional
        Where ``${NAME}`` values come from; default ``os.environ``.

    Raises
    ------
    ConfigError
        Listing every problem found (``.problems``), each naming the file, the
        comparison (or section) and the key.
    """
    environ = os.environ if environ is None else environ
    path = _find_path(path, environ)
    label = path.name
    data = _read(path)
    # The validators (pydantic, SQLAlchemy's URL parser, APScheduler's cron, the spending
    # functions) load only when a file is read: every command module imports this package
    # to build the command line's parser, and most commands never read a file.
    # lazy: the validators are needed only here.
    from .rules import FromEnvironment
    from .sections import check_config

    problems: list[str] = []
    data = _substitute(data, environ, problems, "", FromEnvironment)
    config = check_config(data, path, problems)
    if problems:
        raise ConfigError(problems, label)
    return config


def store_url_from_config(path=None, *, store_only: bool = False, environ=None) -> str:
    """The ``[store] url`` of a configuration file (argument, ``$GAPWATCH_CONFIG``, ``./gapwatch.toml``).

    By default the whole file is validated first. With ``store_only`` only the ``[store]`` table
    is read and checked (by the same rule): what a reader of the store alone needs, such as the
    dashboard, which then starts without loading every comparison's validators.
    """
    if not store_only:
        return load_config(path, environ).store_url
    environ = os.environ if environ is None else environ
    path = _find_path(path, environ)
    data = _read(path)
    # lazy: the URL rule loads SQLAlchemy's URL parser, needed only when a file is read.
    from .model import DEFAULT_STORE_URL
    from .urls import FromEnvironment, database_url

    problems: list[str] = []
    store = data.get("store", {})
    if not isinstance(store, dict):
        raise ConfigError([f"[store]: 'store' must be a table; got {store!r}"], path.name)
    store = _substitute(store, environ, problems, "store", FromEnvironment)
    if problems:
        raise ConfigError(problems, path.name)
    try:
        return str.__str__(database_url(store.get("url", DEFAULT_STORE_URL), path.resolve().parent))
    except ValueError as problem:  # the rule's own words, after the key it concerns
        raise ConfigError([f"[store]: 'url' {problem}"], path.name) from None


def _read(path: Path) -> dict:
    """The file's TOML as a dict; ConfigError when it cannot be read or parsed."""
    label = path.name
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise ConfigError([f"cannot read the configuration file ({exc.strerror or exc})"], label) from None
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ConfigError([f"not valid TOML: {exc}"], label) from None


def _substitute(value, environ, problems, where, text_type):
    if isinstance(value, str):
        if not _ENV_REF.search(value):
            return value

        def replace(match):
            name = match.group(1)
            if name not in environ:
                problems.append(f"{where or 'value'}: environment variable {name!r} is not set")
                return ""
            return environ[name]

        return text_type(_ENV_REF.sub(replace, value), value)
    if isinstance(value, dict):
        return {k: _substitute(v, environ, problems, f"{where}.{k}" if where else k, text_type)
                for k, v in value.items()}
    if isinstance(value, list):
        return [_substitute(v, environ, problems, f"{where}[{i}]", text_type) for i, v in enumerate(value)]
    return value

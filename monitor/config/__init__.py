"""The configuration file: TOML in, frozen dataclasses out, every problem reported at once.

* :mod:`.files` finds and reads the file and takes ``${NAME}`` values from the environment;
* :mod:`.checks` validates it with one typed model per section (and per part of a
  comparison), one message per problem naming the file, the comparison and the key;
* :mod:`.model` holds what a valid file gives: :class:`Config`, :class:`ComparisonConfig` …

The statistical design a comparison freezes at its first look is not here: it is
:class:`monitor.design.Design`, built with ``Design.from_config(comparison)``.
"""

from ..errors import ConfigError
from .files import load_config, store_url_from_config, toml_value
from .model import (ALTERNATIVES, CHANNEL_TYPES, CLUSTER_BUCKETS, DEFAULT_MIN_CLUSTERS, DEFAULT_STORE_URL,
                    FILTER_OPS, METHODS, METRICS, PAIR_BUCKETS, TIME_FORMATS, ChannelConfig, ComparisonConfig,
                    Config, ServiceConfig, SourceConfig)

__all__ = [
    "Config",
    "ComparisonConfig",
    "SourceConfig",
    "ChannelConfig",
    "ServiceConfig",
    "ConfigError",
    "load_config",
    "store_url_from_config",
    "toml_value",
    "config_keys",
    "METHODS",
    "METRICS",
    "ALTERNATIVES",
    "TIME_FORMATS",
    "PAIR_BUCKETS",
    "CLUSTER_BUCKETS",
    "FILTER_OPS",
    "CHANNEL_TYPES",
    "DEFAULT_STORE_URL",
    "DEFAULT_MIN_CLUSTERS",
]


def config_keys() -> set[str]:
    """Every key a ``[[comparison]]``, a channel or ``[service]`` may hold (the README names each)."""
    # lazy: the validators load on demand (see files.load_config)
    from .sections import config_keys as keys

    return keys()


"""The history store: schema, engines and migrations, look history, claims and the read side.

``from monitor import store`` keeps giving the engine helpers (``make_engine``,
``ensure_current``, ``upgrade`` …) as before the store became a package.
"""

from .engine import *  # noqa: F401,F403
from .engine import __all__  # noqa: F401

"""What a process remembers between its looks: one object, passed in, never a module global.

A look can always be taken from the store alone; this memory only saves work:

* the configured :class:`~monitor.design.Design`, per configuration object (frozen, so its
  design cannot change under it; a reloaded configuration brings new objects);
* the sequential boundary after its latest testing look, so a long-running service does
  not re-integrate every earlier look each time (resume costs grow with looks);
* the cells and last testing look as this process wrote them with its newest look, so
  the next look need not read hundreds of day cells back. They are offered to the store
  reader, which uses them only while the store's newest look still carries the random
  state token written with them: a look recorded by another process, a restart (new
  comparison row) or a re-created store (same ids, different token) make it read instead.

Entries are keyed by store (two stores may both hold a comparison with id 1). Each kind is
bounded: the oldest entry goes when a new one would pass the bound. An entry taken for a
look is removed until that look puts it back after its write, so two looks of one
comparison never share one (the service looks from several threads). The service holds
one memory per process; each test makes its own; a caller that passes none keeps nothing.
"""

from __future__ import annotations

import threading

from ..design import Design
from ..store.looks import KeptState

__all__ = ["LookMemory"]

DEFAULT_SIZE = 256


class _Bounded:
    """An insertion-ordered map that drops its oldest entry beyond ``size`` (callers hold the lock)."""

    def __init__(self, size: int):
        self.size = size
        self.entries: dict = {}

    def put(self, key, value):
        self.entries.pop(key, None)
        if len(self.entries) >= self.size:
            self.entries.pop(next(iter(self.entries)), None)
        self.entries[key] = value

    def take(self, key):
        return self.entries.pop(key, None)


class LookMemory:
    """State kept between looks in one process (thread-safe; see the module text)."""

    def __init__(self, size: int = DEFAULT_SIZE):
        if not isinstance(size, int) or size < 1:
            raise ValueError(f"size must be a whole number of at least 1; got {size!r}")
        self._lock = threading.Lock()
        self._designs = _Bounded(size)
        self._boundaries = _Bounded(size)
        self._states = _Bounded(size)

    # ------------------------------------------------------------------ configured designs

    def configured_design(self, comparison) -> Design:
        """``Design.from_config(comparison)``, built once per configuration object (it is frozen)."""
        with self._lock:
            entry = self._designs.entries.get(id(comparison))
        if entry is None or entry[0] is not comparison:
            entry = (comparison, Design.from_config(comparison))
            with self._lock:
                self._designs.put(id(comparison), entry)
        return entry[1]

    # ------------------------------------------------------------------ boundaries

    def take_boundary(self, engine, comparison_id: int, design_key: str):
        """The boundary kept after this comparison's latest testing look, taken out (or None)."""
        with self._lock:
            return self._boundaries.take((_store(engine), comparison_id, design_key))

    def keep_boundary(self, engine, comparison_id: int, design_key: str, boundary) -> None:
        with self._lock:
            self._boundaries.put((_store(engine), comparison_id, design_key), boundary)

    # ------------------------------------------------------------------ cells and last testing look

    def take_state(self, engine, comparison_id: int) -> KeptState | None:
        """The state kept with this process's newest look of the comparison, taken out (or None)."""
        with self._lock:
            return self._states.take((_store(engine), comparison_id))

    def keep_state(self, engine, comparison_id: int, kept: KeptState) -> None:
        with self._lock:
            self._states.put((_store(engine), comparison_id), kept)

    # ------------------------------------------------------------------ inspection

    def holds(self, engine) -> dict:
        """How many boundaries and kept states this memory holds for a store."""
        store = _store(engine)
        with self._lock:
            return {"boundaries": sum(1 for k in self._boundaries.entries if k[0] == store),
                    "states": sum(1 for k in self._states.entries if k[0] == store)}

    def forget(self, engine=None, *, boundaries: bool = True, states: bool = True) -> None:
        """Drop the kept boundaries and/or states of one store (of every store when ``engine``
        is None, the configured designs too)."""
        store = None if engine is None else _store(engine)
        kinds = [kept for kept, chosen in ((self._boundaries, boundaries), (self._states, states)) if chosen]
        with self._lock:
            for kept in kinds:
                for key in [k for k in kept.entries if store is None or k[0] == store]:
                    del kept.entries[key]
            if store is None:
                self._designs.entries.clear()


def _store(engine) -> str:
    return str(engine.url)

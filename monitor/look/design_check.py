"""The design a look uses: the one frozen at the comparison's first look, which must not change.

(Until the typed ``Design`` has its own home, the design is the plain dict of
``ComparisonConfig.design()``; this module holds the rule of what may not change.)
"""

from __future__ import annotations

from ..config import design_hash
from ..errors import DesignChangedError
from .memory import normal_form

__all__ = ["comparable", "design_differences", "design_key", "frozen_design"]


def comparable(design: dict) -> dict:
    """The part of a design that must not change: derived figures left out."""
    d = {k: v for k, v in design.items() if k != "shift"}
    plan = d.get("plan")
    if isinstance(plan, dict):
        # Plan figures are computed from the inputs; the inputs and the planned count decide.
        d["plan"] = {k: v for k, v in plan.items() if k != "figures"}
    return d


def design_key(design: dict) -> str:
    """The stored ``design_hash`` of a design (also keys a kept boundary)."""
    return design_hash(comparable(design))


def design_differences(frozen: dict, configured: dict) -> list[str]:
    """Keys whose values differ between a frozen design and the configured one."""
    a, b = comparable(normal_form(frozen)), comparable(normal_form(configured))
    return sorted(k for k in set(a) | set(b) if a.get(k) != b.get(k))


def frozen_design(name: str, stored: dict | None, configured: dict) -> dict:
    """A copy of the design this look uses: the stored one, or at a first look the configured one.

    Raises DesignChangedError naming the keys when the configuration differs from the
    design frozen at the first look of the active version.
    """
    if stored is None:
        design = dict(configured)
        design["shift"] = None  # fixed by the first look that sees data
        return design
    # The stored design came back from JSON, so it is already in normal form: compare
    # directly, and name the differing keys only when there are some.
    frozen = stored["design"]
    if comparable(frozen) != comparable(configured):
        changed = design_differences(frozen, configured)
        if changed:
            version = stored["version"]
            raise DesignChangedError(
                f"comparison {name!r}: the design frozen at its first look (version {version}) "
                f"differs from the configuration in: {', '.join(changed)}. To start anew, give the "
                f"comparison a new name, or run `gapwatch restart {name}` (archives version "
                f"{version}; the next look starts version {version + 1} with the new design)")
    return dict(frozen)

"""The design a look uses: the one frozen at the comparison's first look, which must not change.

What may not change, and how two designs are compared, is the :class:`monitor.design.Design`'s
own rule (``Design.differences``); this module applies it to the active version of a
comparison and words the refusal.
"""

from __future__ import annotations

from ..design import Design
from ..errors import DesignChangedError

__all__ = ["frozen_design", "display_to_record"]


def frozen_design(name: str, stored: dict | None, configured: Design) -> Design:
    """The design this look uses: the stored one, or at a first look the configured one.

    ``stored`` is the active comparison row (None before its first look). Raises
    DesignChangedError naming the keys when the configuration differs from the design
    frozen at the first look of the active version.
    """
    if stored is None:
        return configured  # its shift is fixed by the first look that sees data
    frozen = Design.from_stored(stored["design"])
    changed = frozen.differences(configured)
    if changed:
        version = stored["version"]
        raise DesignChangedError(
            f"comparison {name!r}: the design frozen at its first look (version {version}) "
            f"differs from the configuration in: {', '.join(changed)}. To start anew, give the "
            f"comparison a new name, or run `gapwatch restart {name}` (archives version "
            f"{version}; the next look starts version {version + 1} with the new design)")
    # The display (group names, unit) is not design: the configured one is shown from now on.
    return frozen.with_display(configured.display)


def display_to_record(stored: dict, configured: Design) -> dict | None:
    """The configured display (stored form) for a version that takes no look now, else None.

    A stopped version, or one whose check found nothing new, records no look, so names and a
    unit changed in the configuration would wait for a look that may never come. They are
    recorded on the version as they are, when the configuration still describes the design
    frozen at its first look (same fingerprint); None when nothing changed, or when the
    configuration describes another design (the version that design starts will show them).
    """
    frozen = Design.from_stored(stored["design"])
    if frozen.display == configured.display or frozen.differences(configured):
        return None
    return configured.display.to_stored()

"""The look: one comparison's running evidence weighed against its boundary, and recorded.

* ``orchestrator`` — ``take_look``: claim → read state → source read → decide → record;
* ``decision``     — the pure decision step (statistic, fraction, boundary, decision,
  repeated interval, adjusted inference after a stop);
* ``statistic``    — the fixed-sample statistic of the running cells (pure);
* ``cells``        — slot cells rolled into running cells, and the look's counts (pure);
* ``row``          — the Look row's values from the evidence and decision (pure);
* ``memory``       — ``LookMemory``, what a process keeps between its looks (injected);
* ``design_check`` — the design frozen at the first look, and what may not change;
* ``record``       — ``LookRecord``, what a look recorded; ``QuietCheck``, a look that found nothing new;
* ``plan``         — the plan a look measures against: replans, events or information
  fraction, conditional power and projected completion (pure);
* ``restart``      — ``restart_comparison``: archive a version, the next look starts anew
  after its watermark.
"""

from .memory import LookMemory
from .orchestrator import take_look
from .record import LookRecord, QuietCheck
from .restart import restart_comparison

__all__ = ["take_look", "restart_comparison", "LookRecord", "QuietCheck", "LookMemory"]

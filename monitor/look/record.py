"""What one look recorded, as the command line, the service and the tests see it."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from datetime import datetime

__all__ = ["LookRecord", "QuietCheck"]


@dataclass(frozen=True)
class LookRecord:
    """What one look recorded (a summary of the Look row)."""

    comparison: str
    version: int
    look: int
    as_of: datetime
    cutoff: datetime
    decision: str
    state: str
    n1: int
    n2: int
    pairs: int | None
    estimate: float | None
    standard_error: float | None
    statistic: float | None
    df: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    fraction: float | None
    boundary_z: float | None
    nominal_p: float | None
    boundary_look: int | None
    clusters: int | None
    design_effect: float | None
    effective_n: float | None
    new_events: int
    late_events: int
    excluded: dict
    warnings: tuple
    look_id: int
    alert_id: str | None
    duration_ms: float
    detail: dict = field(default_factory=dict, repr=False)

    def line(self) -> str:
        """One printable line: look number, decision, estimate and interval."""
        parts = [f"{self.comparison} v{self.version} look {self.look}: {self.decision}"]
        if self.estimate is not None:
            low = "-inf" if self.ci_low is None else f"{self.ci_low:.4g}"
            high = "inf" if self.ci_high is None else f"{self.ci_high:.4g}"
            parts.append(f"estimate {self.estimate:.4g} [{low}, {high}]")
        parts.append(f"n {self.n1}/{self.n2}")
        if self.pairs is not None:
            parts.append(f"pairs {self.pairs}")
        if self.fraction is not None:
            parts.append(f"fraction {self.fraction:.3f}")
        if self.p_value is not None:
            parts.append(f"p {self.p_value:.4g}")
        return "; ".join(parts)

    def to_dict(self) -> dict:
        out = asdict(self)
        out["as_of"] = self.as_of.isoformat()
        out["cutoff"] = self.cutoff.isoformat()
        out["warnings"] = list(self.warnings)
        return out


@dataclass(frozen=True)
class QuietCheck:
    """A look that found nothing new: the comparison was checked, no testing look was recorded.

    ``look`` is the comparison's last recorded look, whose figures (and interval) still stand.
    """

    comparison: str
    version: int
    look: int
    as_of: datetime
    cutoff: datetime
    read_from: datetime | None
    state: str
    n1: int
    n2: int
    new_events: int = 0
    quiet: bool = True
    warnings: tuple = ()

    @property
    def decision(self) -> str:
        return self.state

    def line(self) -> str:
        """One printable line saying what was checked and that nothing was recorded."""
        return (f"{self.comparison} v{self.version}: nothing new up to {self.cutoff.isoformat()}; "
                f"checked, no look recorded (look {self.look} stands: {self.state}; n {self.n1}/{self.n2})")

    def to_dict(self) -> dict:
        out = asdict(self)
        out["as_of"] = self.as_of.isoformat()
        out["cutoff"] = self.cutoff.isoformat()
        out["read_from"] = None if self.read_from is None else self.read_from.isoformat()
        out["warnings"] = list(self.warnings)
        out["decision"] = self.state
        return out

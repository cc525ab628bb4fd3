"""What one look recorded, as the command line, the service and the tests see it."""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from datetime import datetime

__all__ = ["LookRecord"]


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

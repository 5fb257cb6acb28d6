"""Design-rule checks over a Layout: findings are data, the report knows how to print itself."""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Finding:
    """One check result at one place.

    ``rule`` is a stable id (see RULES), ``severity`` "error" or "warning",
    ``value`` and ``limit`` the measured number and the rule's limit (None where
    the rule is not numeric), ``at`` the board position in mm.
    """

    rule: str
    severity: str
    message: str
    at: tuple[float, float]
    value: float | None = None
    limit: float | None = None
    layer: str = ""

    def to_json(self) -> dict:
        return {"rule": self.rule, "severity": self.severity, "message": self.message,
                "at": [round(self.at[0], 6), round(self.at[1], 6)],
                "value": None if self.value is None else round(self.value, 6),
                "limit": None if self.limit is None else round(self.limit, 6), "layer": self.layer}

"""A stage spec: what the user asked for (kind, shrinkage, features, params), before any fit."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from .errors import StageSpecError


@dataclass(frozen=True)
class StageSpec:
    """One stage as the user wrote it; ``features`` empty means every feature of the chain."""

    kind: str
    shrinkage: float = 1.0
    features: tuple[str, ...] = ()
    params: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        try:
            shrinkage = float(self.shrinkage)
        except (TypeError, ValueError):
            raise StageSpecError(f"shrinkage must be a number, not {self.shrinkage!r}", key="shrinkage") from None
        if not math.isfinite(shrinkage) or not 0 < shrinkage <= 1:
            raise StageSpecError(f"shrinkage must be in (0, 1], not {self.shrinkage!r}", key="shrinkage")
        object.__setattr__(self, "shrinkage", shrinkage)
        object.__setattr__(self, "features", tuple(self.features or ()))
        object.__setattr__(self, "params", dict(self.params or {}))

    def to_dict(self) -> dict[str, Any]:
        """Return the spec as a recipe-ready dict (empty parts left out)."""
        out: dict[str, Any] = {"kind": self.kind, "shrinkage": self.shrinkage}
        if self.features:
            out["features"] = list(self.features)
        if self.params:
            out["params"] = dict(self.params)
        return out

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> StageSpec:
        """Return the spec described by ``data`` (keys kind, shrinkage, features, params), checked
        as ``stages.parsing.stage_spec`` checks any stage."""
        from .parsing import stage_spec

        return stage_spec(data)

"""The variance-stabilising transform a series is identified on: its kind, its lambda, and why.

Kept apart from :mod:`app.core.transform` (which chooses and applies a transform with scipy) so
that reading a stored analysis or an order, as the command line's ``status`` does, loads no
numerical library.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Literal

TransformKind = Literal["none", "log", "box_cox"]


@dataclass
class TransformChoice:
    """A variance-stabilising transform and why it was chosen.

    ``kind`` is ``"none"``, ``"log"`` or ``"box_cox"``; ``lam`` is the lambda applied (None for
    no transform, 0 for the log); ``explanation`` says in words what was compared.
    """

    kind: TransformKind
    lam: float | None = None
    explanation: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        if self.kind not in ("none", "log", "box_cox"):
            raise ValueError(f"unknown transform {self.kind!r} (expected none, log or box_cox)")
        if self.kind == "none" and self.lam is not None:
            raise ValueError("a 'none' transform has no lambda")
        if self.kind == "log" and self.lam not in (None, 0.0):
            raise ValueError(f"the log transform is Box-Cox with lambda 0, not {self.lam}")
        if self.kind == "log":
            self.lam = 0.0
        if self.kind == "box_cox" and (self.lam is None or not math.isfinite(self.lam)):
            raise ValueError(f"a Box-Cox transform needs a finite lambda, not {self.lam!r}")

    def to_json(self) -> str | dict:
        """``"none"``, ``"log"`` or ``{"box_cox": lambda}``."""
        return {"box_cox": self.lam} if self.kind == "box_cox" else self.kind

    @classmethod
    def from_json(cls, value: str | dict) -> TransformChoice:
        """Read back what :meth:`to_json` wrote (or a reviewer typed in the same form)."""
        if value == "none":
            return cls(kind="none")
        if value == "log":
            return cls(kind="log")
        if isinstance(value, dict) and set(value) == {"box_cox"}:
            lam = value["box_cox"]
            if isinstance(lam, bool) or not isinstance(lam, (int, float)):
                raise ValueError(f"Box-Cox lambda must be a number, not {lam!r}")
            return cls(kind="box_cox", lam=float(lam))
        raise ValueError(f'transform {value!r} is not "none", "log" or {{"box_cox": lambda}}')

    def name(self) -> str:
        """``none``, ``log`` or ``Box-Cox (lambda 0.5)``: the transform in words."""
        return f"Box-Cox (lambda {self.lam:g})" if self.kind == "box_cox" else self.kind

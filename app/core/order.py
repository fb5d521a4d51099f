"""An ARIMA(p,d,q)(P,D,Q)s order with its deterministic term: the one object every layer asks
for an order's label, its differencing and its size.

Criteria are comparable only between models of the same differenced series, so
:meth:`Order.differencing_key` is the one definition of "the same differencing" in Lagdesk:
``(d, D, s)`` with ``s`` counted only when ``D = 1`` (seasonal AR or MA terms leave the data
untouched, seasonal differencing does not).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from app.core.errors import OrderError

if TYPE_CHECKING:
    from app.core.likelihood import ArmaSpec

MAX_ORDER = 5
MAX_SEASONAL_ORDER = 2
TRENDS = ("n", "c", "t", "ct")
TERM_WORDS = {"n": "", "c": " with a mean", "t": " with a drift", "ct": " with a mean and a linear trend"}
# What validate_order accepts from a person or a program (the engine searches up to MAX_ORDER).
TYPED_LIMITS = (("p", 10), ("d", 2), ("q", 10), ("P", 3), ("D", 1), ("Q", 3))
_LABEL = re.compile(r"ARIMA\((\d+),(\d+),(\d+)\)(?:\((\d+),(\d+),(\d+)\)(\d+))?")


@dataclass(frozen=True)
class Order:
    """ARIMA(p,d,q)(P,D,Q)s with its deterministic term ``trend``: ``n`` none, ``c`` a constant
    (a mean), ``t`` a drift (a linear trend in levels), ``ct`` both, as statsmodels ``ARIMA``
    reads them. An order without seasonal terms has ``s = 0``."""

    p: int
    d: int
    q: int
    P: int = 0
    D: int = 0
    Q: int = 0
    s: int = 0
    trend: str = "n"

    def __post_init__(self) -> None:
        if not (self.P or self.D or self.Q):
            object.__setattr__(self, "s", 0)
        if self.trend not in TRENDS:
            raise OrderError(f"trend must be one of {', '.join(TRENDS)}, not {self.trend!r}")

    @classmethod
    def of(cls, order: Sequence[int], seasonal_order: Sequence[int] | None = None, trend: str = "n") -> Order:
        """From the ``(p, d, q)`` and ``(P, D, Q, s)`` tuples statsmodels uses."""
        p, d, q = (int(v) for v in order)
        sp, sd, sq, s = (int(v) for v in (seasonal_order or (0, 0, 0, 0)))
        return cls(p, d, q, sp, sd, sq, s, trend)

    @property
    def order(self) -> tuple[int, int, int]:
        return (self.p, self.d, self.q)

    @property
    def seasonal_order(self) -> tuple[int, int, int, int]:
        return (self.P, self.D, self.Q, self.s)

    @property
    def period(self) -> int | None:
        return self.s or None

    @property
    def n_arma(self) -> int:
        """The number of ARMA coefficients, p + q + P + Q."""
        return self.p + self.q + self.P + self.Q

    @property
    def lost_to_differencing(self) -> int:
        return self.d + self.s * self.D

    def differencing_key(self) -> tuple[int, int, int]:
        """``(d, D, s)``, ``s`` only with seasonal differencing: equal keys, comparable criteria."""
        return (self.d, self.D, self.s if self.D else 0)

    def same_orders(self, order: Sequence[int], seasonal_order: Sequence[int] | None) -> bool:
        """Whether ``order`` and ``seasonal_order`` (tuples or lists) name this order, trend aside."""
        return Order.of(order, seasonal_order, self.trend) == self

    def contains(self, other: Order) -> bool:
        """Whether ``other`` is this order with some terms fixed at zero: the same differencing,
        every ARMA coefficient and every deterministic term of ``other`` (a mean, a drift, a
        trend), and at least one term more. ARIMA(1,0,0) with a mean and a trend contains
        ARIMA(1,0,0) with a mean; ARIMA(2,0,0) with a mean does not contain ARIMA(1,0,0) with a
        mean and a trend."""
        from app.core.likelihood import is_nested_in  # here: numba is loaded only by code that fits

        if self == other or self.differencing_key() != other.differencing_key():
            return False
        spec, inner = self.arma_spec(), other.arma_spec()
        return (spec == inner or is_nested_in(inner, spec)) and set(other.trend) - {"n"} <= set(self.trend) - {"n"}

    def arma_spec(self) -> ArmaSpec:
        """The ARMA part, for the differenced series."""
        from app.core.likelihood import ArmaSpec

        return ArmaSpec(self.p, self.q, self.P, self.Q, self.s if self.P or self.Q else 0)

    def label(self) -> str:
        """``ARIMA(p,d,q)``, followed by ``(P,D,Q)s`` when the order has seasonal terms."""
        text = f"ARIMA({self.p},{self.d},{self.q})"
        return text + f"({self.P},{self.D},{self.Q}){self.s}" if self.s else text

    def term_words(self) -> str:
        """The deterministic term in words, with a leading space (empty for none): what tells
        two models of the same orders apart."""
        return TERM_WORDS[self.trend]

    def full_label(self) -> str:
        """:meth:`label` and :meth:`term_words`: ``ARIMA(1,0,0)(0,1,1)12 with a drift``."""
        return self.label() + self.term_words()

    def to_json(self) -> dict[str, Any]:
        return {"order": list(self.order), "seasonal_order": list(self.seasonal_order), "trend": self.trend}

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> Order:
        return cls.of(data["order"], data.get("seasonal_order"), data.get("trend", "n"))

    @classmethod
    def from_label(cls, text: str, trend: str = "n") -> Order:
        """Read back what :meth:`label` wrote (analyses stored before schema version 2 kept labels).

        Raises
        ------
        OrderError
            When ``text`` is not such a label.
        """
        match = _LABEL.fullmatch(text.strip())
        if match is None:
            raise OrderError(f"{text!r} is not an order label such as ARIMA(1,0,0)(0,1,1)12")
        p, d, q, sp, sd, sq, s = (int(v) if v is not None else 0 for v in match.groups())
        return cls(p, d, q, sp, sd, sq, s, trend)


def order_label(order: Sequence[int] | None, seasonal_order: Sequence[int] | None = None) -> str:
    """The label of an order given as lists (a stored verdict's); an em dash for no order."""
    return Order.of(order, seasonal_order).label() if order else "—"


def default_trend(d: int, seasonal_d: int = 0) -> str:
    """A constant for an undifferenced model, none once the series is differenced."""
    return "c" if d + seasonal_d == 0 else "n"


def validate_order(
    order: Sequence[Any], seasonal_order: Sequence[Any] | None = None, n: int | None = None, trend: str | None = None
) -> Order:
    """Check an order a person typed or a program sent, and pick the model's deterministic term.

    Raises
    ------
    OrderError
        With a message naming the bad value.
    """
    seasonal_order = seasonal_order if seasonal_order is not None else (0, 0, 0, 0)
    try:
        p, d, q = (_whole(v) for v in order)
        sp, sd, sq, s = (_whole(v) for v in seasonal_order)
    except (TypeError, ValueError):
        raise OrderError(
            f"order must be three whole numbers (p,d,q) and seasonal order four (P,D,Q,s); got {order!r}, {seasonal_order!r}"
        ) from None
    for (name, high), value in zip(TYPED_LIMITS, (p, d, q, sp, sd, sq)):
        if not 0 <= value <= high:
            raise OrderError(f"{name} = {value} is outside 0..{high}")
    if s < 0 or s == 1:
        raise OrderError(f"seasonal period s = {s} must be 0 (no season) or at least 2")
    if s == 0 and (sp or sd or sq):
        raise OrderError("a seasonal order (P,D,Q) needs a seasonal period s >= 2")
    model = Order(p, d, q, sp, sd, sq, s, trend if trend is not None else default_trend(d, sd))
    if n is not None:
        needed = model.lost_to_differencing + max(p + s * sp, q + s * sq) + model.n_arma + 3
        if n < needed:
            raise OrderError(f"{model.label()} needs at least {needed} observations; the series has {n}")
    return model


def _whole(value: Any) -> int:
    if isinstance(value, bool) or float(value) != int(float(value)):
        raise ValueError(value)
    return int(float(value))

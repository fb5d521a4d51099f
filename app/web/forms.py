"""The decision form of the review page (plain HTML form, so it works without JavaScript)."""

from __future__ import annotations

from typing import Annotated, Literal
from urllib.parse import urlencode

from pydantic import BaseModel, Field

from app.core.analysis import Analysis
from app.core.errors import OrderError
from app.core.vocabulary import VerdictStatus
from app.review.decisions import DecisionError
from app.web.deps import SQLITE_MAX_INTEGER, whole_number
from app.web.review import CUSTOM_FIELDS, INTERVENTION_SEPARATOR

SUGGESTION_KEY = "1"
# The form's constant choice: blank is the engine's term for the order.
CONSTANT_CHOICES = {"": None, "yes": True, "no": False}
# Actions that record a state without an order.
STATE_ACTIONS = {"park": VerdictStatus.PARKED, "reopen": VerdictStatus.PENDING, "not_arima": VerdictStatus.NOT_ARIMA}
# What form.decision returns: status, order, seasonal order, transform, include_constant, interventions.
Decision = tuple[str, list[int] | None, list[int] | None, str | dict | None, bool | None, list[dict] | None]
InterventionKindField = Literal["additive", "level_shift", "temporary_change"]


class CustomModel(BaseModel):
    """What goes with a custom order besides the order itself: ``transform`` (blank: the
    analysis', ``none``, ``log``, ``box_cox`` with ``lam``), ``constant`` (blank: the engine's
    term, ``yes``, ``no``) and the interventions: ``interventions`` are the ticked ones
    (``TIMESTAMP|KIND``), ``add_at`` and ``add_kind`` one more, and ``interventions_shown`` says
    the form offered them (without it the analysis' own are kept). The decision form sends them,
    and the forecast check of a custom fit takes them as query parameters.
    """

    transform: Literal["", "none", "log", "box_cox"] = ""
    lam: str = ""
    constant: Literal["", "yes", "no"] = ""
    interventions: list[str] = Field(default_factory=list, max_length=1000)
    interventions_shown: bool = False
    add_at: str = Field("", max_length=64)
    add_kind: InterventionKindField = "additive"

    def chosen_interventions(self) -> list[dict] | None:
        """The interventions to take out with the custom model (time stamp and kind each), or
        None for the analysis' own (the form did not offer them)."""
        if not self.interventions_shown:
            return None
        chosen = []
        for value in self.interventions:
            timestamp, _, kind = value.rpartition(INTERVENTION_SEPARATOR)
            chosen.append({"timestamp": timestamp, "kind": kind})
        if self.add_at.strip():
            chosen.append({"timestamp": self.add_at.strip(), "kind": self.add_kind})
        return chosen

    def model_choice(self) -> tuple[str | dict | None, bool | None]:
        """``(transform, include_constant)`` of the custom model; None for the analysis' choice.

        Raises
        ------
        DecisionError
            When Box-Cox is chosen without a lambda that is a number.
        """
        if self.transform != "box_cox":
            return self.transform or None, CONSTANT_CHOICES[self.constant]
        try:
            lam = float(self.lam)
        except ValueError:
            raise DecisionError(f"Box-Cox needs a lambda (a number such as 0.5), not {self.lam!r}") from None
        return {"box_cox": lam}, CONSTANT_CHOICES[self.constant]

    def query(self) -> str:
        """These fields as a query string (those left at their defaults left out)."""
        fields = self.model_dump(include=set(CustomModel.model_fields), exclude_defaults=True)
        return urlencode({name: "true" if value is True else value for name, value in fields.items()}, doseq=True)


class DecisionForm(CustomModel):
    """The fields of the decision form.

    ``action``: ``approve`` (the suggestion), ``save`` (the chosen candidate or custom order),
    ``park`` (decide later), ``reopen`` (back to pending), ``not_arima`` (no ARIMA order suits
    the series) or ``fit`` (fit the custom order and show it, saving nothing).
    ``choice``: a candidate's rank (``"1"`` is the suggestion) or ``"custom"``; ``transform``
    and the fields of :class:`CustomModel` go with the custom order. ``confirm`` saves an order
    whose residuals fail the Ljung-Box test at 1%.
    """

    action: Literal["approve", "save", "park", "reopen", "not_arima", "fit"] = "save"
    choice: str = SUGGESTION_KEY
    p: str = ""
    d: str = ""
    q: str = ""
    P: str = "0"
    D: str = "0"
    Q: str = "0"
    s: str = "0"
    confirm: bool = False
    note: str = ""
    reviewer: str = ""
    version: Annotated[int, Field(ge=0, le=SQLITE_MAX_INTEGER)] = 0
    fragment: bool = False

    def custom_fields(self) -> dict:
        """What was typed for the custom model: the order fields, the transform, the constant and
        the interventions."""
        return {name: getattr(self, name) for name in (*CUSTOM_FIELDS, "transform", "lam", "constant",
                                                        "interventions", "interventions_shown", "add_at", "add_kind")}

    def custom_order(self) -> tuple[list[int], list[int]]:
        """The typed custom order; blank seasonal fields mean no season.

        Raises
        ------
        OrderError
            Naming the field that is blank or not a whole number.
        """
        values = []
        for name in CUSTOM_FIELDS:
            text = getattr(self, name).strip()
            if not text and name in "PDQs":
                text = "0"
            if not text:
                raise OrderError(f"{name} is empty: give the custom order as whole numbers")
            value = whole_number(text)
            if value is None:
                raise OrderError(f"{name} must be a whole number, not {text!r}")
            values.append(value)
        return values[:3], values[3:]

    def decision(self, analysis: Analysis | None) -> Decision:
        """``(status, order, seasonal_order, transform, include_constant, interventions)`` the
        form asks for.

        A chosen candidate, or a custom model equal to the suggestion (its order, and the
        analysis' transform, term and interventions unless others are chosen), is an approval;
        any other is an override.
        """
        if self.action in STATE_ACTIONS:
            return STATE_ACTIONS[self.action], None, None, None, None, None
        if self.action == "approve":
            return VerdictStatus.APPROVED, None, None, None, None, None
        candidates = analysis.candidates if analysis else ()
        transform: str | dict | None = None
        include_constant: bool | None = None
        interventions: list[dict] | None = None
        if self.choice == "custom":
            order, seasonal = self.custom_order()
            transform, include_constant = self.model_choice()
            interventions = self.chosen_interventions()
        elif (rank := whole_number(self.choice)) is not None and 1 <= rank <= len(candidates):
            picked = candidates[rank - 1].order
            order, seasonal = list(picked.order), list(picked.seasonal_order)
        else:
            raise OrderError(f"choice {self.choice!r} is neither a candidate (1..{len(candidates)}) nor 'custom'")
        suggested = analysis.suggested.order if analysis else None
        is_suggestion = (
            analysis is not None and suggested is not None and suggested.same_orders(order, seasonal)
            and transform in (None, analysis.transform.to_json())
            and include_constant in (None, suggested.trend != "n")
            and (interventions is None or _same_interventions(interventions, analysis))
        )
        if is_suggestion:
            return VerdictStatus.APPROVED, order, seasonal, None, None, None
        return VerdictStatus.OVERRIDDEN, order, seasonal, transform, include_constant, interventions


def _same_interventions(chosen: list[dict], analysis: Analysis) -> bool:
    """Whether the chosen interventions are the analysis' own (the same time and kind each)."""
    return sorted((c["timestamp"], c["kind"]) for c in chosen) == sorted((i.timestamp, str(i.kind)) for i in analysis.interventions)

"""The decision form of the review page (plain HTML form, so it works without JavaScript)."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BaseModel, Field

from app.core.analysis import Analysis
from app.core.errors import OrderError
from app.web.deps import SQLITE_MAX_INTEGER
from app.web.review import CUSTOM_FIELDS

SUGGESTION_KEY = "1"


class DecisionForm(BaseModel):
    """The fields of the decision form.

    ``action``: ``approve`` (the suggestion), ``save`` (the chosen candidate or custom order),
    ``park`` (decide later) or ``fit`` (fit the custom order and show it, saving nothing).
    ``choice``: a candidate's rank (``"1"`` is the suggestion) or ``"custom"``.
    """

    action: Literal["approve", "save", "park", "fit"] = "save"
    choice: str = SUGGESTION_KEY
    p: str = ""
    d: str = ""
    q: str = ""
    P: str = "0"
    D: str = "0"
    Q: str = "0"
    s: str = "0"
    note: str = ""
    reviewer: str = ""
    version: Annotated[int, Field(ge=0, le=SQLITE_MAX_INTEGER)] = 0
    fragment: bool = False

    def custom_fields(self) -> dict:
        return {name: getattr(self, name) for name in CUSTOM_FIELDS}

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
            try:
                values.append(int(text))
            except ValueError:
                raise OrderError(f"{name} must be a whole number, not {text!r}") from None
        return values[:3], values[3:]

    def decision(self, analysis: Analysis | None) -> tuple[str, list[int] | None, list[int] | None]:
        """``(status, order, seasonal_order)`` the form asks for.

        A chosen candidate or custom order equal to the suggestion is an approval; any other is
        an override.
        """
        if self.action == "park":
            return "parked", None, None
        if self.action == "approve":
            return "approved", None, None
        candidates = analysis.candidates if analysis else ()
        if self.choice == "custom":
            order, seasonal = self.custom_order()
        elif self.choice.isdigit() and 1 <= int(self.choice) <= len(candidates):
            picked = candidates[int(self.choice) - 1].order
            order, seasonal = list(picked.order), list(picked.seasonal_order)
        else:
            raise OrderError(f"choice {self.choice!r} is neither a candidate (1..{len(candidates)}) nor 'custom'")
        is_suggestion = analysis is not None and analysis.suggested.order.same_orders(order, seasonal)
        return ("approved" if is_suggestion else "overridden"), order, seasonal

"""Which series a reviewer is working through: the filter of the queue, the API and bulk actions."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import asdict, dataclass, replace
from typing import Any
from urllib.parse import urlencode

from app.core.vocabulary import Confidence, VerdictStatus

DEFAULT_SORT = "attention"


@dataclass(frozen=True)
class SeriesFilter:
    """Series by verdict status, confidence, flag, id text (``q``) and id ``prefix``, in the order
    ``sort`` (a sort key of :func:`app.store.series.list_series`); empty fields mean 'any'."""

    status: str | None = None
    confidence: str | None = None
    flag: str | None = None
    q: str | None = None
    prefix: str | None = None
    sort: str = DEFAULT_SORT
    descending: bool = False

    @classmethod
    def from_params(cls, params: Mapping[str, str]) -> SeriesFilter:
        """Read the filter from query parameters (blank values are 'any')."""
        def text(name: str) -> str | None:
            value = (params.get(name) or "").strip()
            return value or None

        return cls(
            status=text("status"), confidence=text("confidence"), flag=text("flag"), q=text("q"), prefix=text("prefix"),
            sort=text("sort") or DEFAULT_SORT,
            descending=(params.get("descending") or "").lower() in ("1", "true", "on", "yes"),
        )

    def store_kwargs(self) -> dict[str, Any]:
        """Keyword arguments of ``list_series`` / ``series_neighbours``."""
        return asdict(self)

    def params(self, **changes: Any) -> dict[str, Any]:
        """This filter (with ``changes``) as query parameters, default values left out."""
        merged = {**asdict(self), **changes}
        fields = {k: v for k, v in merged.items() if v not in (None, "", False) and not (k == "sort" and v == DEFAULT_SORT)}
        if fields.get("descending") is True:
            fields["descending"] = "1"
        return fields

    def query(self, **changes: Any) -> str:
        """This filter (with ``changes``) as a query string, default values left out."""
        return urlencode(self.params(**changes))

    @property
    def is_empty(self) -> bool:
        return self == SeriesFilter(sort=self.sort, descending=self.descending)

    def firm_pending(self) -> SeriesFilter | None:
        """The part of this filter a bulk approval touches: pending series with a firm suggestion.

        None when the filter excludes them (it asks for another status or confidence).
        """
        if self.status not in (None, VerdictStatus.PENDING) or self.confidence not in (None, Confidence.FIRM):
            return None
        return replace(self, status=VerdictStatus.PENDING.value, confidence=Confidence.FIRM.value)

"""The closed sets of words every layer shares: confidence levels, analysis flags, verdict states,
and the flags in words.

They are ``StrEnum`` members, so they compare equal to their text, are written to JSON and
SQLite as that text, and a misspelt name fails where it is written rather than where it is
read.
"""

from __future__ import annotations

from enum import StrEnum


class Confidence(StrEnum):
    """How far a suggestion can be trusted (:mod:`app.core.confidence` says how it is scored).

    Listed from the most to the least trusted.
    """

    FIRM = "firm"
    TENTATIVE = "tentative"
    WEAK = "weak"


class Flag(StrEnum):
    """Why a series or a fitted candidate deserves a second look."""

    TOO_SHORT = "too_short"
    GAPS = "gaps"
    LONG_GAP = "long_gap"
    TOO_FEW_SEASONS = "too_few_seasons"
    TRANSFORMED = "transformed"
    UNCERTAIN_DIFFERENCING = "uncertain_differencing"
    UNCERTAIN_SEASONAL_DIFFERENCING = "uncertain_seasonal_differencing"
    TREND_STATIONARY = "trend_stationary"
    NO_CONVERGENCE = "no_convergence"
    RESIDUAL_AUTOCORRELATION = "residual_autocorrelation"
    NEAR_UNIT_ROOT = "near_unit_root"
    REDUNDANT_ROOTS = "redundant_roots"
    FIXED_SEASONALITY = "fixed_seasonality"
    LARGE_RESIDUAL = "large_residual"
    INTERMITTENT_DEMAND = "intermittent_demand"
    OUTLIERS = "outliers"
    LEVEL_SHIFT = "level_shift"
    FLAT_RUN = "flat_run"
    LONGER_CYCLE = "longer_cycle"


WEAK_FLAGS = frozenset({Flag.TOO_SHORT, Flag.NO_CONVERGENCE, Flag.REDUNDANT_ROOTS, Flag.RESIDUAL_AUTOCORRELATION})
"""Flags that make a suggestion ``weak`` (:mod:`app.core.confidence`)."""

NOT_FIRM_FLAGS = frozenset({Flag.LONG_GAP, Flag.NEAR_UNIT_ROOT, Flag.UNCERTAIN_SEASONAL_DIFFERENCING,
                            Flag.TREND_STATIONARY, Flag.FIXED_SEASONALITY})
"""Flags that keep a suggestion from ``firm``, their reason given as the flag."""

WORDED_DOUBT_FLAGS = frozenset({Flag.LARGE_RESIDUAL, Flag.INTERMITTENT_DEMAND, Flag.OUTLIERS, Flag.LEVEL_SHIFT, Flag.FLAT_RUN,
                                Flag.LONGER_CYCLE, Flag.UNCERTAIN_DIFFERENCING})
"""Flags that keep a suggestion from ``firm`` too, their reason written out by the check that
raised them (where, how large, what class)."""


class InterventionKind(StrEnum):
    """The kinds of intervention the engine detects (Chen & Liu 1993, §2)."""

    ADDITIVE = "additive"
    LEVEL_SHIFT = "level_shift"
    TEMPORARY_CHANGE = "temporary_change"

    def words(self) -> str:
        return {"additive": "additive outlier", "level_shift": "level shift", "temporary_change": "temporary change"}[self.value]


class VerdictStatus(StrEnum):
    """The review state of a series. ``recheck`` is set by Lagdesk when new data break a decided
    order; every other state is a reviewer's. ``not_arima`` is the reviewer's decision that no
    ARIMA order should forecast the series (intermittent or lumpy demand, say): it is decided,
    carries no order, and the export lists it apart for the forecasting job to route."""

    PENDING = "pending"
    APPROVED = "approved"
    OVERRIDDEN = "overridden"
    PARKED = "parked"
    RECHECK = "recheck"
    NOT_ARIMA = "not_arima"


DECIDED = (VerdictStatus.APPROVED, VerdictStatus.OVERRIDDEN)
"""The states whose order is handed on to forecasting."""

AWAITING = (VerdictStatus.PENDING, VerdictStatus.RECHECK)
"""The states that wait for a reviewer's decision."""

REVIEWER_STATUSES = (VerdictStatus.PENDING, VerdictStatus.APPROVED, VerdictStatus.OVERRIDDEN, VerdictStatus.PARKED,
                     VerdictStatus.NOT_ARIMA)
"""The states a reviewer may set (``pending`` reopens a decided series)."""


# Every flag the engine writes, in words (the pages, the CLI's tables).
FLAG_WORDS: dict[str, str] = {
    Flag.TOO_SHORT: "short series: fewer points than Box-Jenkins identification asks for",
    Flag.GAPS: "missing points: the likelihood skips them, the correlograms use the pairs present",
    Flag.LONG_GAP: "a long gap: the correlograms rest on fewer pairs and the tests of d on bridged values",
    Flag.NO_CONVERGENCE: "the optimiser did not converge",
    Flag.RESIDUAL_AUTOCORRELATION: "the residuals are still autocorrelated (Ljung-Box)",
    Flag.NEAR_UNIT_ROOT: "a root lies near the unit circle",
    Flag.REDUNDANT_ROOTS: "AR and MA roots nearly cancel: the order may be too large",
    Flag.UNCERTAIN_DIFFERENCING: "the tests left d open, or a fit showed a unit root they left in; the fits of the candidates chose d",
    Flag.UNCERTAIN_SEASONAL_DIFFERENCING: "the two seasonal strength measures left D open; the fits of the candidates chose it",
    Flag.TREND_STATIONARY: "stationary around a trend rather than a unit root",
    Flag.TOO_FEW_SEASONS: "fewer than three full seasons: the seasonal part is read from little data",
    Flag.TRANSFORMED: "identified on a log or Box-Cox transform of the series",
    Flag.FIXED_SEASONALITY: "the seasonal pattern looks fixed: the seasonal difference may be one too many",
    Flag.LARGE_RESIDUAL: "a residual beyond the outlier threshold: an outlier or a shift the model does not explain",
    Flag.INTERMITTENT_DEMAND: "intermittent or lumpy demand: a Gaussian ARIMA suits it poorly",
    Flag.OUTLIERS: "outliers found and estimated with the model (Chen-Liu)",
    Flag.LEVEL_SHIFT: "a level shift found and estimated with the model: the differencing was read without it",
    Flag.FLAT_RUN: "one value repeated over a run of points: a stuck sensor, a frozen feed, values carried forward?",
    Flag.LONGER_CYCLE: "the residuals of hourly data keep a weekly cycle that the daily season does not take",
}


SAFETY_CAUTION = ("suggestions are statistical. Where a series feeds safety-relevant monitoring, follow the site's "
                  "engineering procedures.")
"""Said on every page, beside every decision form, and where the command line decides an order."""


# How the engine writes a flag among its confidence reasons (app.core.confidence).
FLAG_REASON_PREFIX = "flag: "


def flag_words(flag: str) -> str:
    """A flag in words; one without words (none should be) with its underscores as spaces."""
    return FLAG_WORDS.get(flag, flag.replace("_", " "))


def reason_words(reason: str) -> str:
    """A confidence reason for reading: a flag (``flag: NAME``) in its words, others as written."""
    if reason.startswith(FLAG_REASON_PREFIX):
        return flag_words(reason.removeprefix(FLAG_REASON_PREFIX))
    return reason

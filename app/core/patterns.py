"""Reading candidate ARMA orders from correlogram patterns, and the extended ACF.

A practitioner reads the ACF and PACF for cut-offs and decays: a PACF that cuts off after lag p
with a decaying ACF suggests AR(p); an ACF that cuts off after lag q with a decaying PACF
suggests MA(q); both decaying suggests a mixed ARMA. The extended ACF (EACF) table of Tsay &
Tiao (1984) gives a second opinion for mixed models.

The cut-off rule must not be fooled by the one lag in twenty that crosses a 95% band by chance:
within a window of ``L`` lags a lag counts as *significant* when it crosses the 95% band and
either is one of the first :data:`LOW_LAGS` lags or follows a significant lag, or when it
crosses the stricter Bonferroni band ``z(1 - alpha / (2L))`` on its own. The cut-off is the last
significant lag in the window (0 when none is).

For a seasonal model the window is the same ``L = max_order + 3`` lags whatever the period, so a
short season (quarterly, weekly) leaves room to tell a cut-off from a decay. The lags from
``s - 1`` on (lags 1 and 2 excepted) belong to the seasonal part, which
:func:`read_seasonal_patterns` reads: the spikes at the multiples of ``s`` and, in a
multiplicative model, the satellites on either side of them (the airline model's ACF has
spikes at ``s - 1``, ``s`` and ``s + 1``). Inside the window such a lag counts only as the
continuation of a run of significant lags (a decay that reaches it), never as a spike on its
own.

References
----------
.. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series Analysis*,
   5th ed., §6.2 (identifying the order from the ACF and PACF).
.. [2] Tsay, R.S. & Tiao, G.C. (1984). Consistent estimates of autoregressive parameters and
   extended sample autocorrelation function for stationary and nonstationary ARMA models.
   *JASA* 79, 84-96.
.. [3] Cryer, J.D. & Chan, K.-S. (2008). *Time Series Analysis with Applications in R*, 2nd ed.,
   §6.3 (reading the EACF table).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy.stats import norm

from app.core.correlogram import DEFAULT_ALPHA, Correlogram, autocorrelations

LOW_LAGS = 2
EACF_THRESHOLD_Z = 2.0


def significant_lags(
    values: np.ndarray, band: np.ndarray, window: int, alpha: float = DEFAULT_ALPHA, period: int | None = None
) -> list[int]:
    """Lags (1-based) in ``1..window`` that count as significant by the rule in the module notes.

    Parameters
    ----------
    values, band : ndarray
        Correlations at lags ``1..K`` and the half-widths of their 95% band.
    window : int
        Number of lags examined (at most ``K``).
    alpha : float
        Level of the band.
    period : int, optional
        Seasonal period ``s``: a lag from ``s - 1`` on (beyond :data:`LOW_LAGS`) counts only
        when it crosses the band right after a significant lag, never on its own (a lone spike
        there is the seasonal part's: at ``s`` or a satellite of it).

    Returns
    -------
    list of int

    References
    ----------
    .. [1] Box, G.E.P., Jenkins, G.M., Reinsel, G.C. & Ljung, G.M. (2015). *Time Series
       Analysis*, 5th ed., §6.2 and ch. 9 (from memory).
    """
    window = min(window, len(values))
    z95 = norm.ppf(1 - alpha / 2)
    strict = band[:window] * norm.ppf(1 - alpha / (2 * window)) / z95
    found: list[int] = []
    for k in range(1, window + 1):
        v, b = abs(values[k - 1]), band[k - 1]
        follows = (k - 1) in found
        if period and k >= max(period - 1, LOW_LAGS + 1):
            significant = v > b and follows
        else:
            significant = v > strict[k - 1] or (v > b and (k <= LOW_LAGS or follows))
        if significant:
            found.append(k)
    return found


def cutoff(values: np.ndarray, band: np.ndarray, window: int, alpha: float = DEFAULT_ALPHA, period: int | None = None) -> int:
    """The last significant lag within the window (0 when none is); see :func:`significant_lags`."""
    lags = significant_lags(values, band, window, alpha, period)
    return lags[-1] if lags else 0


@dataclass
class PatternReading:
    """What the correlograms say about p and q, in numbers and in words."""

    acf_cutoff: int
    pacf_cutoff: int
    proposals: dict[tuple[int, int], list[str]] = field(default_factory=dict)
    words: list[str] = field(default_factory=list)

    def propose(self, p: int, q: int, source: str) -> None:
        self.proposals.setdefault((p, q), [])
        if source not in self.proposals[(p, q)]:
            self.proposals[(p, q)].append(source)


def read_patterns(
    cg: Correlogram, max_p: int, max_q: int, eacf_vertex: tuple[int, int] | None = None, period: int | None = None
) -> PatternReading:
    """Propose (p, q) pairs from the cut-off and decay patterns of a correlogram.

    The window examined for a cut-off is ``max_order + 3`` lags, so a cut-off at the maximum
    order can be told from a slow decay, with or without a season. For a seasonal model
    (``period`` given) the lags from ``s - 1`` on count only as part of a run of significant
    lags: a lone spike there is the seasonal part's (:func:`significant_lags`).
    """
    q_cut = cutoff(cg.acf, cg.acf_band, max_q + 3, period=period)
    p_cut = cutoff(cg.pacf, cg.pacf_band, max_p + 3, period=period)
    reading = PatternReading(acf_cutoff=q_cut, pacf_cutoff=p_cut)
    acf_cuts, pacf_cuts = q_cut <= max_q, p_cut <= max_p
    if q_cut == 0 and p_cut == 0:
        reading.words.append("No ACF or PACF lag stands out: white noise.")
        reading.propose(0, 0, "white noise")
    if pacf_cuts and p_cut > 0:
        reading.words.append(f"The PACF cuts off after lag {p_cut}: AR({p_cut}).")
        reading.propose(p_cut, 0, "PACF cut-off")
    if acf_cuts and q_cut > 0:
        reading.words.append(f"The ACF cuts off after lag {q_cut}: MA({q_cut}).")
        reading.propose(0, q_cut, "ACF cut-off")
    if p_cut > 1 and q_cut > 1:
        reading.words.append("Both the ACF and the PACF tail off: a mixed ARMA model.")
        reading.propose(1, 1, "both tail off")
    if eacf_vertex is not None and eacf_vertex[0] <= max_p and eacf_vertex[1] <= max_q:
        reading.words.append(f"The extended ACF has its vertex at ARMA({eacf_vertex[0]},{eacf_vertex[1]}).")
        reading.propose(*eacf_vertex, "EACF vertex")
    if not reading.proposals:
        reading.propose(min(p_cut, max_p), 0, "PACF cut-off")
    return reading


def with_neighbours(proposals: dict[tuple[int, int], list[str]], max_p: int, max_q: int) -> dict[tuple[int, int], list[str]]:
    """The proposals and their +-1 neighbours in p and in q, within the limits."""
    out = {pq: list(src) for pq, src in proposals.items()}
    for (p, q) in list(proposals):
        for dp, dq in ((1, 0), (-1, 0), (0, 1), (0, -1)):
            pp, qq = p + dp, q + dq
            if 0 <= pp <= max_p and 0 <= qq <= max_q:
                out.setdefault((pp, qq), ["neighbour"])
    return out


def eacf_table(x: np.ndarray, max_ar: int = 5, max_ma: int = 5) -> tuple[np.ndarray, np.ndarray]:
    """The extended sample ACF of Tsay & Tiao (1984) by iterated AR regressions.

    Cell ``(k, j)`` is the lag ``j + 1`` sample autocorrelation of ``w_t = x_t - sum phi_i x_{t-i}``,
    where the AR(k) coefficients come from the ``j``-th iterated regression (``x_t`` on its ``k``
    lags and, at lag ``h``, the residuals of iteration ``j - h``). For an ARMA(p, q) the cells
    with ``k >= p`` and ``j - q >= k - p`` vanish: a triangle of zeros with vertex ``(p, q)``.

    With missing points (NaN) each regression uses the rows that are complete, a filtered value
    that needs a missing one is missing, the autocorrelations are those of the pairs present
    (:func:`app.core.correlogram.autocorrelations`) and ``n`` counts the observed points.

    Returns
    -------
    values : ndarray, shape (max_ar + 1, max_ma + 1)
    significant : ndarray of bool, same shape; ``|r| > 2 / sqrt(n - k - j)`` (Tsay & Tiao 1984)
    """
    z = np.asarray(x, dtype=float) - np.nanmean(x)
    n = int(np.count_nonzero(~np.isnan(z)))
    values = np.zeros((max_ar + 1, max_ma + 1))
    significant = np.zeros_like(values, dtype=bool)
    for k in range(max_ar + 1):
        residual_history: list[np.ndarray] = []
        for j in range(max_ma + 1):
            w = _iterated_ar_filter(z, k, residual_history)
            r = _autocorrelation_at(w, j + 1)
            values[k, j] = r
            significant[k, j] = abs(r) > EACF_THRESHOLD_Z / np.sqrt(max(n - k - j, 1))
    return values, significant


def _iterated_ar_filter(z: np.ndarray, k: int, residual_history: list[np.ndarray]) -> np.ndarray:
    """One more iterated AR(k) regression; appends its residuals, returns the AR-filtered series."""
    n, j = z.size, len(residual_history)
    start = k + j
    if k == 0:
        residual_history.append(z.copy())
        return z[start:] if start else z
    cols = [z[start - i : n - i] for i in range(1, k + 1)]
    cols += [residual_history[j - h][start - h : n - h] for h in range(1, j + 1)]
    design = np.column_stack(cols)
    target = z[start:]
    complete = ~np.isnan(design).any(axis=1) & ~np.isnan(target)
    coef, *_ = np.linalg.lstsq(design[complete], target[complete], rcond=None)
    resid = np.full(n, 0.0)
    resid[start:] = target - design @ coef
    residual_history.append(resid)
    phi = coef[:k]
    w = z[k:] - sum(phi[i - 1] * z[k - i : n - i] for i in range(1, k + 1))
    return w


def _autocorrelation_at(w: np.ndarray, lag: int) -> float:
    if lag >= w.size:
        return 0.0
    if np.isnan(w).any():
        return float(autocorrelations(w, lag)[lag])
    c = w - w.mean()
    denom = float(c @ c)
    return float(c[lag:] @ c[:-lag]) / denom if denom > 0 else 0.0


def eacf_vertex(significant: np.ndarray) -> tuple[int, int] | None:
    """The top-left vertex of a triangle of non-significant cells in the EACF table.

    ``(k, j)`` is a vertex when, for it and the next two rows, every cell on or right of the
    diagonal ``j + (row - k)`` is non-significant. The vertex with the smallest ``k + j`` wins,
    then the smallest ``k``.
    """
    rows, cols = significant.shape
    best = None
    for total in range(rows + cols - 1):
        for k in range(min(total, rows - 1) + 1):
            j = total - k
            if j >= cols:
                continue
            ok = True
            for r in range(k, min(k + 3, rows)):
                start = j + (r - k)
                if start < cols and significant[r, start:].any():
                    ok = False
                    break
            if ok:
                best = (k, j)
                break
        if best is not None:
            return best
    return None


def seasonal_cutoff(values: np.ndarray, band: np.ndarray, period: int, max_order: int) -> int:
    """The last of the seasonal lags ``s, 2s, .., (max_order + 1)s`` whose spike crosses the
    band, counted only while every earlier seasonal lag crossed it too (the contiguity rule of
    :func:`significant_lags` applied to the seasonal lags)."""
    count = 0
    for k in range(1, max_order + 2):
        lag = k * period
        if lag > len(values) or abs(values[lag - 1]) <= band[lag - 1]:
            break
        count = k
    return count


def read_seasonal_patterns(cg: Correlogram, period: int, max_P: int, max_Q: int) -> tuple[dict[tuple[int, int], list[str]], list[str]]:
    """Propose seasonal (P, Q) pairs from the ACF and PACF at the seasonal lags.

    Read as at the low lags (Box, Jenkins, Reinsel & Ljung 2015, ch. 9): an ACF spike at ``s``
    and nothing at ``2s`` suggests Q = 1; PACF spikes at ``s`` and ``2s`` suggest P = 2; no spike
    at either suggests no seasonal ARMA term. A cut-off beyond the limit is read as a decay and
    proposes the mixed (1, 1); so do spikes in both within the limits, beside the pure terms.
    The words say which of these was read: both decaying, one, or spikes in both.
    """
    Q_cut = seasonal_cutoff(cg.acf, cg.acf_band, period, max_Q)
    P_cut = seasonal_cutoff(cg.pacf, cg.pacf_band, period, max_P)
    proposals: dict[tuple[int, int], list[str]] = {}
    words = []
    if Q_cut == 0 and P_cut == 0:
        proposals[(0, 0)] = ["no seasonal spike"]
        words.append(f"No ACF or PACF spike at the seasonal lags {period}, {2 * period}: no seasonal ARMA term.")
    if 0 < Q_cut <= max_Q:
        proposals.setdefault((0, Q_cut), []).append("seasonal ACF cut-off")
        words.append(f"The ACF has spikes at the first {Q_cut} seasonal lag(s) and none after: seasonal MA({Q_cut}).")
    if 0 < P_cut <= max_P:
        proposals.setdefault((P_cut, 0), []).append("seasonal PACF cut-off")
        words.append(f"The PACF has spikes at the first {P_cut} seasonal lag(s) and none after: seasonal AR({P_cut}).")
    if Q_cut > max_Q and P_cut > max_P:
        proposals.setdefault((1, 1), []).append("seasonal both tail off")
        words.append("Both tail off at the seasonal lags: a mixed seasonal term.")
    elif Q_cut > max_Q or P_cut > max_P:
        which, limit = ("ACF", max_Q) if Q_cut > max_Q else ("PACF", max_P)
        proposals.setdefault((1, 1), []).append("seasonal decay")
        words.append(f"The {which} has spikes at more than the first {limit} seasonal lag(s), read as a decay: "
                     "a mixed seasonal term is weighed too.")
    elif Q_cut and P_cut:
        # Each reading alone names a pure term; a seasonal ARMA shows spikes in both, so the mixed
        # term is proposed beside them and the fits decide.
        proposals.setdefault((1, 1), []).append("seasonal spikes in both")
        words.append("Both the ACF and the PACF have seasonal spikes: a mixed seasonal term is weighed beside the two pure ones.")
    return proposals, words

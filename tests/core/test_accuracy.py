"""Identification accuracy on a seeded batch of simulated series of known order.

21 processes (tests/core/accuracy_batch.py) x 8 replications at n = 120 and at n = 500: 336
series. The engine is compared with the plain approach (KPSS d, every p, q <= 3, lowest BIC;
Hyndman & Khandakar 2008 for the KPSS rule, Schwarz 1978 for BIC) on the same series. The
floors below are the figures measured on this seed (README, "Accuracy") rounded down a little,
so the test guards against regressions without claiming more than was measured.
"""

from __future__ import annotations

import json
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import pandas as pd
import pytest
from accuracy_batch import accuracy_batch, plain_bic_grid, score

from app.jobs.executors.blas import pin_blas_threads

pytestmark = pytest.mark.slow
REPLICATIONS = 8
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"


def _engine(values):
    from app.core.identify import identify_series

    result = identify_series(pd.Series(values), "simulated")
    return [c.model.order for c in result.candidates], result.confidence.level, len(result.candidates)


@pytest.fixture(scope="module")
def measured():
    figures = {}
    # One BLAS thread per worker: two workers with a BLAS pool each on 2 cores ran 5x slower.
    with ProcessPoolExecutor(max_workers=2, initializer=pin_blas_threads) as pool:
        for n in (120, 500):
            batch = accuracy_batch(n, REPLICATIONS)
            truth = [s.order for s in batch]
            engine = list(pool.map(_engine, [s.values for s in batch], chunksize=4))
            plain = list(pool.map(plain_bic_grid, [s.values for s in batch], chunksize=4))
            figures[n] = {
                "engine": score(truth, [e[0] for e in engine], [e[1] for e in engine], [e[2] for e in engine]),
                "plain": score(truth, plain, None, [16] * len(plain)),
                "firm": [(e[1] == "firm", e[0][0] == t) for e, t in zip(engine, truth)],
            }
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / "accuracy.json").write_text(json.dumps(
        {str(n): {k: vars(v) for k, v in f.items() if k != "firm"} for n, f in figures.items()}, indent=2))
    for n, f in figures.items():
        print(f["engine"].line(f"engine n={n}"))
        print(f["plain"].line(f"plain  n={n}"))
    return figures


@pytest.mark.parametrize("n, floor", [(120, 0.60), (500, 0.90)])
def test_accuracy_exact_order_beats_plain_bic_grid(measured, n, floor):
    engine, plain = measured[n]["engine"], measured[n]["plain"]
    assert engine.exact >= floor
    assert engine.exact > plain.exact


@pytest.mark.parametrize("n, floor", [(120, 0.80), (500, 0.95)])
def test_accuracy_top3_floor(measured, n, floor):
    assert measured[n]["engine"].top3 >= floor


def test_accuracy_differencing_at_least_as_good_as_kpss_alone(measured):
    for n in (120, 500):
        assert measured[n]["engine"].d_right >= measured[n]["plain"].d_right


def test_accuracy_firm_suggestions_of_long_series_are_mostly_right_and_cover_a_third(measured):
    # Series under MIN_FIRM_LENGTH are never firm (app/core/confidence.py, rule 5), so the share
    # is that of the long series.
    firm_hits = [hit for is_firm, hit in measured[500]["firm"] if is_firm]
    assert len(firm_hits) >= len(measured[500]["firm"]) / 3
    assert sum(firm_hits) / len(firm_hits) >= 0.90
    assert not any(is_firm for is_firm, _ in measured[120]["firm"])

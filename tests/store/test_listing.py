"""The dashboard list: filters, sort keys, paging with the total, neighbours, counts, status, and
the series an import rejected (listed apart as not analysed)."""

from __future__ import annotations

import pytest

from app.core.errors import LagdeskError
from app.core.order import Order
from app.core.vocabulary import Confidence, Flag
from app.store.analyses import save_analysis, save_failure
from app.store.imports import import_portfolio
from app.store.series import (
    FLAG_SEVERITY,
    SORT_KEYS,
    count_by,
    flags_present,
    group_counts,
    id_group,
    list_series,
    load_series,
    next_awaiting,
    problem_reason,
    refused_updates,
    rejected_series,
    series_fingerprint,
    series_neighbours,
    series_values,
)
from app.store.status import not_analysed, portfolio_status
from app.store.verdicts import STATUSES, mark_recheck, set_verdict

# series id: (verdict, analysis confidence or "failed"/None, flags, suggested order, reviewer)
PORTFOLIO = {
    "a-recheck": ("recheck", "firm", [], [1, 0, 0], "ann"),
    "b-weak": ("pending", "weak", ["near_unit_root", "redundant_roots"], [2, 1, 2], ""),
    "c-weak": ("pending", "weak", ["near_unit_root"], [0, 1, 1], ""),
    "d-tentative": ("pending", "tentative", ["gaps"], [1, 1, 0], ""),
    "e-firm": ("pending", "firm", [], [0, 0, 1], ""),
    "f-failed": ("pending", "failed", [], None, ""),
    "g-missing": ("pending", None, [], None, ""),
    "h-parked": ("parked", "weak", ["long_gap"], [3, 0, 0], "ann"),
    "i-approved": ("approved", "firm", [], [1, 0, 1], "Carl"),
    "j-overridden": ("overridden", "tentative", ["gaps"], [0, 1, 1], "bob"),
}
# What needs a human first: the recheck; then pending series from the most doubtful analysis
# (weak with more flags, weak, failed) to none yet; then parked; then decided ones.
ATTENTION_ORDER = ["a-recheck", "b-weak", "c-weak", "f-failed", "d-tentative", "e-firm", "g-missing",
                   "h-parked", "j-overridden", "i-approved"]


@pytest.fixture
def listed_db(fresh_db, write_csv, monthly, relabel):
    lengths = {sid: 30 + i for i, sid in enumerate(PORTFOLIO)}
    import_portfolio(fresh_db, write_csv("p.csv", {sid: monthly(i, n=lengths[sid]) for i, sid in enumerate(PORTFOLIO)}))
    for sid, (status, confidence, flags, order, reviewer) in PORTFOLIO.items():
        fingerprint = series_fingerprint(fresh_db, sid)
        if confidence == "failed":
            save_failure(fresh_db, sid, fingerprint, "every candidate failed", None)
        elif confidence is not None:
            save_analysis(fresh_db, sid, fingerprint, relabel(sid, confidence=Confidence(confidence), flags=tuple(flags),
                                                              suggested=Order.of(order)), None)
        decided = "approved" if status == "recheck" else status
        if decided != "pending":
            set_verdict(fresh_db, sid, status=decided, order=None if decided == "parked" else order,
                        seasonal_order=None, reviewer=reviewer, version=0)
        if status == "recheck":
            mark_recheck(fresh_db, sid, "the data changed")
    return fresh_db


def ids(items):
    return [item["series_id"] for item in items]


def test_default_order_puts_what_needs_a_human_first(listed_db):
    total, items = list_series(listed_db)
    assert total == len(PORTFOLIO)
    assert ids(items) == ATTENTION_ORDER
    attention = [item["attention"] for item in items]
    assert attention == sorted(attention, reverse=True)
    assert ids(list_series(listed_db, descending=True)[1]) == ATTENTION_ORDER[::-1]


def test_items_carry_the_summary_of_analysis_and_verdict(listed_db):
    items = {item["series_id"]: item for item in list_series(listed_db)[1]}
    assert items["b-weak"]["flags"] == ["near_unit_root", "redundant_roots"]
    assert items["b-weak"]["suggested"] == {"order": [2, 1, 2], "seasonal_order": [0, 0, 0, 0], "transform": "none",
                                            "trend": "n", "interventions": []}
    assert (items["b-weak"]["n"], items["b-weak"]["freq"]) == (31, "MS")
    assert items["a-recheck"]["recheck_reason"] == "the data changed"
    assert items["a-recheck"]["chosen"]["order"] == [1, 0, 0]
    assert [items[s]["analysis_state"] for s in ("e-firm", "f-failed", "g-missing")] == ["current", "failed", "missing"]
    assert {s: item["analysis_message"] for s, item in items.items() if item["analysis_message"]} == {
        "f-failed": "every candidate failed"}
    assert items["g-missing"]["suggested"] == dict.fromkeys(("order", "seasonal_order", "transform", "trend", "interventions"))


@pytest.mark.parametrize("filters, expected", [
    (dict(status="pending"), {"b-weak", "c-weak", "d-tentative", "e-firm", "f-failed", "g-missing"}),
    (dict(status=["approved", "overridden"]), {"i-approved", "j-overridden"}),
    (dict(confidence="weak"), {"b-weak", "c-weak", "h-parked"}),
    (dict(confidence="weak", status="pending"), {"b-weak", "c-weak"}),
    (dict(flag="gaps"), {"d-tentative", "j-overridden"}),
    (dict(flag="near_unit_root"), {"b-weak", "c-weak"}),
    (dict(q="WEAK"), {"b-weak", "c-weak"}),
    (dict(q="-", flag="nothing_like_this"), set()),
])
def test_filters_keep_the_matching_series_and_count_them(listed_db, filters, expected):
    total, items = list_series(listed_db, **filters)
    assert total == len(expected) and set(ids(items)) == expected
    assert ids(items) == [s for s in ATTENTION_ORDER if s in expected]


def test_paging_returns_slices_of_one_order_with_the_whole_total(listed_db):
    pages = [list_series(listed_db, limit=3, offset=offset) for offset in (0, 3, 6, 9, 12)]
    assert {total for total, _ in pages} == {len(PORTFOLIO)}
    assert [len(items) for _, items in pages] == [3, 3, 3, 1, 0]
    assert [sid for _, items in pages for sid in ids(items)] == ATTENTION_ORDER


@pytest.mark.parametrize("sort, expected", [
    ("series_id", sorted(PORTFOLIO)),
    ("n", list(PORTFOLIO)),  # lengths grow with the position in PORTFOLIO
    ("confidence", ["b-weak", "c-weak", "h-parked", "d-tentative", "j-overridden", "a-recheck", "e-firm",
                    "i-approved", "f-failed", "g-missing"]),
    ("status", ["b-weak", "c-weak", "d-tentative", "e-firm", "f-failed", "g-missing", "i-approved",
                "j-overridden", "h-parked", "a-recheck"]),
    ("order", ["e-firm", "c-weak", "j-overridden", "a-recheck", "i-approved", "d-tentative", "b-weak", "h-parked",
               "f-failed", "g-missing"]),
    ("reviewer", ["a-recheck", "h-parked", "j-overridden", "i-approved", "b-weak", "c-weak", "d-tentative",
                  "e-firm", "f-failed", "g-missing"]),
])
def test_each_sort_key_orders_the_list(listed_db, sort, expected):
    assert ids(list_series(listed_db, sort=sort, limit=100)[1]) == expected


def test_sort_keys_are_all_tested_and_bad_options_are_named(listed_db):
    assert set(SORT_KEYS) == {"attention", "series_id", "n", "confidence", "status", "order", "reviewer"}
    with pytest.raises(LagdeskError, match="sort must be one of"):
        list_series(listed_db, sort="colour")
    with pytest.raises(LagdeskError, match="status must be one of .* not 'done'"):
        list_series(listed_db, status="done")
    with pytest.raises(LagdeskError, match="confidence must be one of"):
        list_series(listed_db, confidence="high")


@pytest.mark.parametrize("options", [dict(), dict(status="pending"), dict(sort="n", descending=True),
                                     dict(confidence="weak", sort="series_id")])
def test_neighbours_are_the_adjacent_items_of_the_same_list(listed_db, options):
    order = ids(list_series(listed_db, limit=100, **options)[1])
    for i, sid in enumerate(order):
        expected = (order[i - 1] if i > 0 else None, order[i + 1] if i + 1 < len(order) else None)
        assert series_neighbours(listed_db, sid, **options) == expected
    assert series_neighbours(listed_db, "not-listed", **options) == (None, None)


@pytest.mark.parametrize("options", [dict(), dict(sort="n", descending=True), dict(confidence="firm", sort="series_id")])
def test_next_awaiting_skips_the_decided_and_parked_series_of_the_same_list(listed_db, options):
    listed = list_series(listed_db, limit=100, **options)[1]
    order = ids(listed)
    awaiting = {item["series_id"] for item in listed if item["status"] in ("pending", "recheck")}
    for i, sid in enumerate(order):
        expected = next((later for later in order[i + 1:] if later in awaiting), None)
        assert next_awaiting(listed_db, sid, **options) == expected
    assert next_awaiting(listed_db, "not-listed", **options) is None


NO_VERDICTS = dict.fromkeys(STATUSES, 0)


def test_count_by_and_portfolio_status(listed_db):
    verdicts = {**NO_VERDICTS, "pending": 6, "approved": 1, "overridden": 1, "parked": 1, "recheck": 1}
    assert count_by(listed_db) == {
        "confidence": {"weak": 3, "tentative": 2, "firm": 3},
        "status": verdicts,
        "total": 10,
        "reviewed": 2,
    }
    assert portfolio_status(listed_db) == {
        "series": 10, "analysed": 8, "stale": 1, "failed": 1, "earlier_engine": 0, "rejected": 0,
        "confidence": {"weak": 3, "tentative": 2, "firm": 3}, "verdicts": verdicts,
        "not_analysed": [{"series_id": "f-failed", "stage": "analysis", "reason": "every candidate failed"}],
        "refused_updates": [],
    }


def test_status_of_an_empty_database(fresh_db):
    assert portfolio_status(fresh_db) == {
        "series": 0, "analysed": 0, "stale": 0, "failed": 0, "earlier_engine": 0, "rejected": 0,
        "confidence": {"weak": 0, "tentative": 0, "firm": 0}, "verdicts": NO_VERDICTS, "not_analysed": [],
        "refused_updates": [],
    }
    assert list_series(fresh_db) == (0, [])


def _csv_rows(path, rows: dict[str, list[float]]):
    """A long CSV of integer-step series: ``{series_id: values}``."""
    path.write_text("series_id,timestamp,value\n" + "".join(
        f"{sid},{t},{v!r}\n" for sid, values in rows.items() for t, v in enumerate(values)))
    return path


@pytest.mark.parametrize("message, line, reason", [
    ("series 's' (line 3): has no values", 3, "has no values"),
    # The job's failure of a problem whose engine message named the series already.
    ("series 's': series 's': seasonal period 24 is too long", None, "seasonal period 24 is too long"),
    ("every candidate failed", None, "every candidate failed"),
])
def test_problem_reason_drops_the_series_id_the_message_starts_with(message, line, reason):
    assert problem_reason("s", message, line) == reason


def test_rejected_series_are_the_import_rejections_not_stored_since(fresh_db, write_csv, monthly, tmp_path):
    # Two series the import refuses (prepare.py: constant values; fewer than MIN_POINTS) beside a
    # good one: each listed once, with the reason the import gave, without the id it starts with.
    first = import_portfolio(fresh_db, write_csv("good.csv", {"shop/good": monthly(1)}))
    report = import_portfolio(fresh_db, _csv_rows(tmp_path / "bad.csv", {
        "shop/flat": [4.0] * 40, "other/short": [1.0, 3.0, 2.0, 5.0, 4.0]}))
    assert first.rejected == [] and {r["series_id"] for r in report.rejected} == {"shop/flat", "other/short"}

    listed = rejected_series(fresh_db)
    assert [r["series_id"] for r in listed] == ["other/short", "shop/flat"]
    by_id = {r["series_id"]: r for r in report.rejected}
    for item in listed:
        assert f"series {item['series_id']!r}: {item['reason']}" == by_id[item["series_id"]]["message"]
        assert (item["flag"], item["line"], item["file"]) == (by_id[item["series_id"]]["flag"], None, report.file)
        assert item["imported_at"] == report.imported_at
    assert [r["flag"] for r in listed] == ["too_short", "constant"]
    assert list_series(fresh_db)[0] == 1  # only the stored series is listed
    assert [r["series_id"] for r in rejected_series(fresh_db, prefix="shop/")] == ["shop/flat"]
    assert [r["series_id"] for r in rejected_series(fresh_db, q="SHORT")] == ["other/short"]
    assert not_analysed(fresh_db) == [{"series_id": r["series_id"], "stage": "import", "reason": r["reason"]} for r in listed]
    assert portfolio_status(fresh_db)["rejected"] == 2


def test_a_rejected_series_shows_its_latest_reason_and_leaves_the_list_once_stored(fresh_db, tmp_path):
    import_portfolio(fresh_db, _csv_rows(tmp_path / "a.csv", {"s": [2.0] * 30}))
    assert [r["flag"] for r in rejected_series(fresh_db)] == ["constant"]
    import_portfolio(fresh_db, _csv_rows(tmp_path / "b.csv", {"s": [2.0, 1.0, 3.0]}))  # still refused, now too short
    assert [r["flag"] for r in rejected_series(fresh_db)] == ["too_short"]
    import_portfolio(fresh_db, _csv_rows(tmp_path / "c.csv", {"s": [float((t * 7) % 11) for t in range(30)]}))
    assert rejected_series(fresh_db) == []
    assert list_series(fresh_db)[0] == 1


def test_a_stored_series_whose_new_data_an_import_refused_is_named_until_stored_again(fresh_db, tmp_path):
    # The update is refused (a value that is not a number), the series keeps its earlier data
    # and its analysis: status says so, where it named only series never stored before.
    values = [float((t * 7) % 11) for t in range(30)]
    import_portfolio(fresh_db, _csv_rows(tmp_path / "a.csv", {"s": values, "t": values}))
    (tmp_path / "b.csv").write_text("series_id,timestamp,value\ns,30,1\ns,31,x\nt,30,2\n")
    report = import_portfolio(fresh_db, tmp_path / "b.csv")
    assert [r["series_id"] for r in report.rejected] == ["s"]
    assert rejected_series(fresh_db) == []
    [refused] = refused_updates(fresh_db)
    assert (refused["series_id"], refused["file"], refused["flag"]) == ("s", report.file, "bad_value")
    assert portfolio_status(fresh_db)["refused_updates"] == [{"series_id": "s", "reason": refused["reason"], "file": report.file,
                                                           "line": refused["line"]}]
    import_portfolio(fresh_db, _csv_rows(tmp_path / "c.csv", {"s": values + [1.0, 2.0]}))
    assert refused_updates(fresh_db) == []


def test_loading_a_series_and_its_analysis_uses_indexes_not_scans(listed_db):
    from app.store.analyses import load_analysis

    statements = []
    with listed_db.tracer(lambda sql, params: statements.append((sql, params))):
        load_series(listed_db, "b-weak")
        load_analysis(listed_db, "b-weak")
    plans = [" ".join(str(row[-1]) for row in listed_db.execute(f"EXPLAIN QUERY PLAN {sql}", params).fetchall())
             for sql, params in statements]
    assert len(plans) == 3
    assert all("SCAN" not in plan and "SEARCH" in plan for plan in plans), plans
    assert any("observations USING PRIMARY KEY (series_id=?)" in plan for plan in plans)


def test_items_carry_the_main_reason_of_the_confidence(listed_db, relabel):
    sid = "d-tentative"
    reasons = ("flag: uncertain_differencing", "the best rival is within 3.9 of the suggestion in BIC rank score")
    save_analysis(listed_db, sid, series_fingerprint(listed_db, sid),
                  relabel(sid, confidence=Confidence.TENTATIVE, confidence_reasons=reasons), None)
    items = {item["series_id"]: item for item in list_series(listed_db)[1]}
    assert items[sid]["main_reason"] == "flag: uncertain_differencing"
    assert items["g-missing"]["main_reason"] is None and items["f-failed"]["main_reason"] is None


def test_attention_puts_a_severe_flag_before_more_flags_of_less_weight(listed_db, relabel):
    # Two tentative pending series: one with a residual failure, one transformed with filled gaps.
    for sid, flags in (("d-tentative", ["residual_autocorrelation"]), ("e-firm", ["transformed", "gaps"])):
        save_analysis(listed_db, sid, series_fingerprint(listed_db, sid),
                      relabel(sid, confidence=Confidence.TENTATIVE, flags=tuple(flags)), None)
    order = ids(list_series(listed_db, status="pending", confidence="tentative")[1])
    assert order == ["d-tentative", "e-firm"]


def test_flag_severity_ranks_residual_failure_and_non_convergence_above_transformed():
    assert FLAG_SEVERITY["residual_autocorrelation"] == FLAG_SEVERITY["no_convergence"] == 3
    assert FLAG_SEVERITY["transformed"] == 1
    assert set(FLAG_SEVERITY) == {str(flag) for flag in Flag}


def test_flags_present_counts_the_flags_stored_analyses_carry(listed_db):
    assert flags_present(listed_db) == {"gaps": 2, "long_gap": 1, "near_unit_root": 2, "redundant_roots": 1}


@pytest.mark.parametrize("series_id, depth, group", [
    ("bakery/shop-3/bread", 1, "bakery/"), ("bakery/shop-3/bread", 2, "bakery/shop-3/"),
    ("bakery/shop-3/bread", 3, "bakery/shop-3/bread"), ("flat-id", 1, "flat-id"),
])
def test_id_group_is_the_first_parts_of_an_id_or_the_whole_id(series_id, depth, group):
    assert id_group(series_id, depth) == group


def test_group_counts_count_each_group_by_status_and_pending_confidence(fresh_db, write_csv, monthly, relabel):
    ids = ["co/a/x", "co/a/y", "co/b/z", "other/q"]
    import_portfolio(fresh_db, write_csv("g.csv", {sid: monthly(i) for i, sid in enumerate(ids)}))
    for sid, level in zip(ids, ["weak", "firm", "firm", "tentative"]):
        save_analysis(fresh_db, sid, series_fingerprint(fresh_db, sid), relabel(sid, confidence=Confidence(level)), None)
    set_verdict(fresh_db, "co/a/y", status="approved", order=[1, 0, 0], seasonal_order=None, reviewer="ann", version=0)
    zero = dict(total=0, pending=0, weak=0, tentative=0, firm=0, decided=0, parked=0, recheck=0)
    assert group_counts(fresh_db, 1) == [
        {**zero, "prefix": "co/", "total": 3, "pending": 2, "weak": 1, "firm": 1, "decided": 1},
        {**zero, "prefix": "other/", "total": 1, "pending": 1, "tentative": 1},
    ]
    assert [g["prefix"] for g in group_counts(fresh_db, 2, prefix="co/")] == ["co/a/", "co/b/"]
    assert group_counts(fresh_db, 2, prefix="co/a/")[0]["total"] == 2
    with pytest.raises(LagdeskError, match="depth"):
        group_counts(fresh_db, 0)


def test_series_values_are_the_observed_values_in_time_order(listed_db):
    assert series_values(listed_db, "b-weak") == load_series(listed_db, "b-weak").tolist()
    assert series_values(listed_db, "no-such-series") == []

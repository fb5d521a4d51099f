"""Concurrent reviewers against a live ``lagdesk serve`` on a file database (loopback only,
bounded: 16 clients x 200 posts, each request with a 30 s timeout).

Checked: every acknowledged verdict is in the history exactly once and nothing else is; every
deliberately stale post got 409; no 5xx answer and no "database is locked" anywhere. The
throughput and the p50/p95 latency over all requests are printed (run with ``-s`` to see them).
"""

from __future__ import annotations

from collections import Counter

import pytest
from conftest import table_rows
from reviewers import build_portfolio, percentiles_ms, run_reviewers, stored_history

CLIENTS = 16
POSTS_PER_CLIENT = 200
SERIES = 64


@pytest.mark.slow
def test_sixteen_reviewers_lose_no_verdict(tmp_path, live_server):
    db_path = tmp_path / "load.db"
    series_ids = build_portfolio(db_path, SERIES)
    server = live_server(db_path)
    logs, seconds = run_reviewers(server.url, CLIENTS, series_ids, POSTS_PER_CLIENT)
    server_log = server.stop()

    acks = [ack for log in logs for ack in log.acks]
    statuses = sum((Counter(log.statuses) for log in logs), Counter())
    requests = sum(statuses.values())
    p50, p95 = percentiles_ms(logs)
    stale_sent = sum(log.stale_sent for log in logs)
    stale_refused = sum(log.stale_refused for log in logs)
    print(
        f"\nload: {CLIENTS} clients x {POSTS_PER_CLIENT} posts on {SERIES} series: {requests} requests in "
        f"{seconds:.1f} s ({requests / seconds:.0f} req/s), p50 {p50:.1f} ms, p95 {p95:.1f} ms; "
        f"{len(acks)} verdicts acknowledged, {sum(log.races_lost for log in logs)} lost a race (409), "
        f"{stale_refused}/{stale_sent} deliberately stale refused (409); statuses {dict(statuses)}"
    )
    assert [bad for log in logs for bad in log.bad] == []
    assert sum(log.transport_errors for log in logs) == 0
    assert all(status < 500 for status in statuses)
    assert stale_sent > 0 and stale_refused == stale_sent
    assert "locked" not in server_log and "Traceback" not in server_log, server_log[-3000:]

    history = Counter(stored_history(db_path))
    acknowledged = Counter((ack.series_id, ack.version, ack.note) for ack in acks)
    assert max(acknowledged.values()) == 1
    assert history == acknowledged  # each acknowledged verdict exactly once, nothing else
    verdicts = {row[0]: row for row in table_rows(db_path)["verdicts"]}
    for series_id in series_ids:  # versions run 1..n without a hole
        versions = sorted(v for sid, v, _ in history if sid == series_id)
        assert versions == list(range(1, len(versions) + 1))
    assert len(verdicts) == SERIES

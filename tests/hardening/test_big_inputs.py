"""Big inputs, made on the fly in tmp_path (never committed): a 10^6-point series and a file of
about 205 MB (4,000 series of 2,500 points; over the default 200 MiB upload limit).

* The 10^6-point series is refused with a message naming its length and the limit, by
  ``lagdesk import``, ``lagdesk identify`` and the upload, while the good series beside it are
  stored; the identification engine never sees it (it would take hours and tens of GB). The
  reader rejects it at its first row past the points limit (100,000 rows, the command line's
  default as the upload's); given a higher limit, the preparation refuses its grid.
* The big file imports from the command line (the size limit is the upload's), and the upload of
  it is refused with 413 before it is read, leaving the database as it was.
"""

from __future__ import annotations

import json
from contextlib import closing

import pytest
from conftest import SEED_ID, assert_no_traceback, run_lagdesk, stored_series, table_rows
from corpus_files import good_values
from reviewers import api_client

from app.core.prepare import MAX_POINTS

MILLION = 10**6
BIG_SERIES = 4_000
BIG_POINTS = 2_500
UPLOAD_TIMEOUT_S = 600


def _million_point_file(path):
    """One series of 10^6 integer steps after a good series of 24."""
    with path.open("w") as out:
        out.write("series_id,timestamp,value\n")
        out.writelines(f"good,{i + 1},{v}\n" for i, v in enumerate(good_values()))
        out.writelines(f"huge,{i + 1},{(i * 7919) % 1000 / 10}\n" for i in range(MILLION))
    return path


def _big_file(path):
    with path.open("w") as out:
        out.write("series_id,timestamp,value\n")
        for s in range(BIG_SERIES):
            out.write("".join(f"shop-{s:05d},{i},{(i * 37 + s) % 101}.25\n" for i in range(1, BIG_POINTS + 1)))
    return path


@pytest.mark.slow
def test_a_million_point_series_is_refused_by_every_way_in(tmp_path, seeded_db, live_server):
    path = _million_point_file(tmp_path / "million.csv")
    first_past_limit = 2 + 24 + MAX_POINTS
    too_many_rows = f"series 'huge' (line {first_past_limit}): has {MILLION:,} rows; at most {MAX_POINTS:,} are accepted per series"
    too_long = f"would need {MILLION:,} points on its grid, sampled every step; at most {MAX_POINTS:,} can be identified"

    done = run_lagdesk("import", str(path), "--db", str(seeded_db))
    assert done.returncode == 0 and done.stderr == "", done
    assert f"rejected: {too_many_rows}" in done.stdout
    assert stored_series(seeded_db) == {SEED_ID, "good"}

    done = run_lagdesk("identify", str(path), "--workers", "1", "--json", "--max-points", str(2 * MILLION))
    assert done.returncode == 0, done.stderr
    assert_no_traceback(done.stderr)
    result = json.loads(done.stdout)
    assert [s["series_id"] for s in result["series"]] == ["good"]
    assert [p["message"] for p in result["problems"]] == [f"series 'huge': {too_long} (aggregate to a coarser frequency or keep a recent window)"]

    server = live_server(seeded_db)
    with path.open("rb") as handle, closing(api_client(server.url)) as client:
        response = client.post(f"{server.url}/api/imports", files={"file": ("million.csv", handle, "text/csv")}, timeout=UPLOAD_TIMEOUT_S)
    assert response.status_code == 200, response.text
    assert [r["message"] for r in response.json()["rejected"]] == [too_many_rows]


@pytest.mark.slow
def test_a_200_mb_file_imports_from_the_command_line_and_is_refused_by_the_upload(tmp_path, seeded_db, live_server):
    path = _big_file(tmp_path / "big.csv")
    size = path.stat().st_size
    assert size > 200 * 1024 * 1024

    server = live_server(seeded_db)
    before = table_rows(seeded_db)
    with path.open("rb") as handle, closing(api_client(server.url)) as client:
        response = client.post(f"{server.url}/api/imports", files={"file": ("big.csv", handle, "text/csv")}, timeout=UPLOAD_TIMEOUT_S)
    assert response.status_code == 413 and "upload limit of 200 MiB" in response.json()["detail"]
    assert table_rows(seeded_db) == before
    server.stop()

    done = run_lagdesk("import", str(path), "--db", str(seeded_db), timeout=UPLOAD_TIMEOUT_S)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines()[0] == f"{path}: {BIG_SERIES} added, 0 updated, 0 unchanged, 0 rejected"
    assert len(stored_series(seeded_db)) == BIG_SERIES + 1
    print(f"\nbig file: {size / 1e6:.0f} MB imported from the command line; upload refused with 413")

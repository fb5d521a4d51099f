"""Fuzzing the app through its own OpenAPI schema with schemathesis (ASGI transport, in process:
no network at all). Every operation gets a bounded number of generated requests, valid and
invalid; none may be answered with a 5xx, and every documented response must match its schema.

The HTML pages are not in the schema (it describes the JSON API). The two operations that
start an analysis run (``POST /runs``, ``POST /api/runs``) are left
out: each call would start worker processes that outlive the example. (schemathesis' own
pytest plugin does not run under pytest 9, so each operation's strategy is driven by
hypothesis here.)
"""

from __future__ import annotations

import pytest
import schemathesis
from hypothesis import HealthCheck, find, given, settings
from hypothesis.errors import NoSuchExample, Unsatisfiable
from reviewers import build_portfolio
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import content_type_conformance, response_schema_conformance

from app.config import Settings
from app.web.main import create_app
from app.web.security import CSRF_COOKIE, CSRF_HEADER

EXAMPLES_PER_OPERATION = 30
STARTS_A_RUN = r"^(/api)?/runs$"
CHECKS = [not_a_server_error, response_schema_conformance, content_type_conformance]
SCHEMATHESIS_HOST = "testserver"  # the Host header of schemathesis' in-process client
# The CSRF cookie and header a script holds after GET /api/csrf (any value, as long as they agree).
CSRF_TOKEN = "fuzz-csrf-token"
QUIET = settings(max_examples=EXAMPLES_PER_OPERATION, deadline=None, suppress_health_check=list(HealthCheck), database=None)


def _schema(settings: Settings):
    return schemathesis.openapi.from_asgi("/openapi.json", create_app(settings)).exclude(method="POST", path_regex=STARTS_A_RUN)


# The schema does not depend on the data: list the operations once, without a database.
OPERATIONS = [result.ok().label for result in _schema(Settings(db_path="unused.db", allowed_hosts=(SCHEMATHESIS_HOST,))).get_all_operations()]


@pytest.fixture(scope="module")
def api_schema(tmp_path_factory):
    db_path = tmp_path_factory.mktemp("fuzz") / "fuzz.db"
    build_portfolio(db_path, 6)
    return _schema(Settings(db_path=db_path, analysis_workers=1, allowed_hosts=(SCHEMATHESIS_HOST,)))


@pytest.mark.slow
@pytest.mark.parametrize("mode", [GenerationMode.POSITIVE, GenerationMode.NEGATIVE])
@pytest.mark.parametrize("label", OPERATIONS)
def test_no_operation_answers_with_a_server_error(api_schema, label, mode):
    strategy = api_schema.find_operation_by_label(label).as_strategy(generation_mode=mode)
    if not _can_generate(strategy):
        pytest.skip(f"no {mode.value} request can be made for {label} (nothing in it can be invalid)")

    @given(case=strategy)
    @QUIET
    def check(case):
        case.call_and_validate(checks=CHECKS, headers={CSRF_HEADER: CSRF_TOKEN}, cookies={CSRF_COOKIE: CSRF_TOKEN})

    check()


def _can_generate(strategy) -> bool:
    try:
        find(strategy, lambda _: True, settings=QUIET)
    except (NoSuchExample, Unsatisfiable):
        return False
    return True

"""In a real browser (Debian's chromium driven by Playwright, as tests/web/test_browser.py does):
a server started with an access token sends a stranger to the login page; after the token is
typed the dashboard opens; a note holding ``<script>`` shows as text and runs nothing; the
decision form, with its CSRF field, saves a verdict.

Attacks from other sites, each page served to the browser by Playwright as the attacker's
server would serve it:

* **DNS rebinding**: a page at ``http://rebind.test:PORT/`` whose name then resolves to
  127.0.0.1 (Chromium's ``--host-resolver-rules``) reads ``/api/orders``, takes a CSRF token
  from ``/api/csrf`` and posts a verdict, all same-origin for the browser. The same page against
  a server that allows the name ``rebind.test`` succeeds, so the test sees the attack work
  where nothing stops it.
* **Another site** embeds a forecast check as an ``<img>`` and posts a verdict with ``fetch``.

Chromium's Local Network Access checks would block a public page's requests to 127.0.0.1
before they reach the server; they are turned off here, as older browsers and other browsers
do not have them, so what is tested is the server's own defence.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path
from urllib.parse import quote

import httpx
import pytest
from conftest import SEED_ID, table_rows
from reviewers import stored_history
from threaded_server import served

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--no-first-run"]
TOKEN = "browser-test-token-0123456789"
NOTE = "<script>window.__lagdeskInjected = true</script><img src=x onerror=\"window.__lagdeskInjected = true\">"
PAGE_TIMEOUT_MS = 15_000
REBIND_NAME = "rebind.test"
ATTACKER_NAME = "attacker.test"
ANSWER_POLLS = 150
ANSWER_POLL_MS = 100
ATTACK_ARGS = [f"--host-resolver-rules=MAP {REBIND_NAME} 127.0.0.1", "--disable-features=LocalNetworkAccessChecks"]


@contextmanager
def browser_tab(*extra_args: str):
    """A tab of headless Chromium (skipped, or failed under CI, without the browser)."""
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        problem = "Playwright for Python is not installed"
    else:
        problem = None if CHROMIUM.exists() else f"no browser at {CHROMIUM} (apt-get install -y chromium)"
    if problem:
        if os.environ.get("CI"):
            pytest.fail(f"browser tests cannot run under CI: {problem}")
        pytest.skip(problem)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=[*CHROMIUM_ARGS, *extra_args])
        try:
            tab = browser.new_page()
            tab.set_default_timeout(PAGE_TIMEOUT_MS)
            yield tab
        finally:
            browser.close()


@pytest.fixture
def page():
    with browser_tab() as tab:
        yield tab


@pytest.fixture
def attack_page():
    """A tab whose browser resolves rebind.test to this machine and lets public pages reach it."""
    with browser_tab(*ATTACK_ARGS) as tab:
        yield tab


def test_login_then_a_scripted_note_is_text_and_the_form_saves(seeded_db, live_server, page):
    server = live_server(seeded_db, "--token", TOKEN)
    api = f"{server.url}/api/series/{quote(SEED_ID, safe='/')}/verdict"
    saved = httpx.post(api, json={"status": "parked", "version": 0, "note": NOTE, "reviewer": "Ada"},
                       headers={"X-Lagdesk-Token": TOKEN})
    assert saved.status_code == 200

    review = f"{server.url}/series/{quote(SEED_ID, safe='/')}"
    page.goto(review)
    assert page.url.startswith(f"{server.url}/login")
    page.fill("input[name=token]", TOKEN)
    page.click("form.stacked button[type=submit]")
    page.wait_for_url(review)

    assert page.evaluate("window.__lagdeskInjected === undefined")
    assert NOTE in page.inner_text("body")  # the markup is shown, as characters

    page.fill("#decision textarea[name=note]", "second look")
    page.fill("#decision input[name=reviewer]", "Bo")
    page.click("#decision button[value=park]")
    page.wait_for_load_state()
    notes = [note for sid, _, note in stored_history(seeded_db) if sid == SEED_ID]
    assert notes == [NOTE, "second look"]


REBINDING_PAGE = """<!doctype html><html><body><script>
window.attack = (async () => {
  const out = {};
  const orders = await fetch('/api/orders');
  out.read = orders.status;
  out.leaked = (await orders.text()).includes('lagdesk-orders');
  const csrf = await fetch('/api/csrf');
  out.csrf = csrf.status;
  const token = csrf.ok ? (await csrf.json()).csrf_token : 'none';
  const post = await fetch(%(verdict)s, {method: 'POST', headers: {'Content-Type': 'application/json', 'X-CSRF-Token': token},
                                          body: JSON.stringify({status: 'parked', version: 0, reviewer: 'mallory', note: 'rebound'})});
  out.write = post.status;
  return out;
})();
</script></body></html>"""


def _rebinding_attack(page, port: int) -> dict:
    """Serve the attacker's page at rebind.test:PORT (its first answer, from the attacker's
    server) and let its scripts run against the name, which now resolves to 127.0.0.1."""
    url = f"http://{REBIND_NAME}:{port}/innocent.html"
    verdict = f"/api/series/{quote(SEED_ID, safe='/')}/verdict"
    page.route(url, lambda route: route.fulfill(status=200, content_type="text/html",
                                                body=REBINDING_PAGE % {"verdict": repr(verdict)}))
    page.goto(url)
    return page.evaluate("window.attack")


def test_a_rebinding_page_can_neither_read_nor_write(seeded_db, attack_page):
    before = table_rows(seeded_db)
    with served(seeded_db) as port:
        outcome = _rebinding_attack(attack_page, port)
    assert outcome == {"read": 400, "leaked": False, "csrf": 400, "write": 400}
    assert table_rows(seeded_db) == before


def test_the_rebinding_page_works_where_the_name_is_allowed(seeded_db, attack_page):
    """The control: the same page against a server told to answer to rebind.test."""
    with served(seeded_db, allowed_hosts=(REBIND_NAME,)) as port:
        outcome = _rebinding_attack(attack_page, port)
    assert outcome == {"read": 200, "leaked": True, "csrf": 200, "write": 200}
    assert [note for sid, _, note in stored_history(seeded_db) if sid == SEED_ID] == ["rebound"]


CROSS_SITE_PAGE = """<!doctype html><html><body>
<img id="check" src="%(check)s">
<script>
fetch(%(verdict)s, {method: 'POST', mode: 'no-cors', headers: {'Content-Type': 'text/plain'},
                    body: JSON.stringify({status: 'parked', version: 0, reviewer: 'mallory', note: 'cross-site'})});
</script></body></html>"""


def test_another_site_can_start_no_forecast_check_and_post_no_verdict(seeded_db, attack_page):
    """What the server answered is read from the server: the browser hides a blocked image's answer."""
    before = table_rows(seeded_db)
    answers: list[tuple[str, str, int]] = []
    check = f"/api/series/{SEED_ID}/backtest"
    verdict = f"/api/series/{SEED_ID}/verdict"
    with served(seeded_db, answers=answers) as port:
        base = f"http://127.0.0.1:{port}"
        url = f"http://{ATTACKER_NAME}/page.html"
        body = CROSS_SITE_PAGE % {"check": f"{base}{quote(check)}?order=1,0,0", "verdict": repr(base + quote(verdict))}
        attack_page.route(url, lambda route: route.fulfill(status=200, content_type="text/html", body=body))
        attack_page.goto(url)
        for _ in range(ANSWER_POLLS):  # both requests leave with the page; wait for their answers
            if {("GET", check), ("POST", verdict)} <= {(method, path) for method, path, _ in answers}:
                break
            attack_page.wait_for_timeout(ANSWER_POLL_MS)
    assert ("GET", check, 403) in answers and ("POST", verdict, 403) in answers, answers
    assert table_rows(seeded_db) == before

"""Candidates side by side, wide screens and the dark scheme, in headless Chromium.

The comparison's numbers are checked against the JSON API (whose equality with the single-order
forecast check tests/web/test_compare.py checks); the layout by where the charts land; the
colour scheme by the colours the page and its charts are drawn in. Screenshots go to
test-artifacts/ (compare-*.png, wide-*.png, dark-*.png).
"""

from __future__ import annotations

from urllib.parse import quote, urlencode

import pytest
from browser_kit import ARTIFACTS, api, assert_served_locally, series_url

pytestmark = pytest.mark.browser

COMPARED = "hearthloaf/chain/sugar-kg"
CHECK_TIMEOUT_MS = 90_000
# --bg and --chart-ink of the dark scheme in static/lagdesk.css
DARK_BACKGROUND = "rgb(20, 24, 31)"
DARK_CHART_INK = "rgb(216, 221, 230)"

AXES = """() => {
  const gd = document.getElementById('chart-forecast-comparison');
  const L = gd._fullLayout;
  return {x: L.xaxis.range, x2: L.xaxis2.range, y: L.yaxis.range, y2: L.yaxis2.range,
          panels: [L.yaxis.domain, L.yaxis2.domain], hasThird: 'yaxis3' in L,
          legend: Array.from(gd.querySelectorAll('.legendtext')).map(e => e.textContent)};
}"""


def order_key(candidate: dict) -> str:
    return f"{','.join(map(str, candidate['order']))};{','.join(map(str, candidate['seasonal_order']))}"


def compare_two(page, live_server: str):
    """Tick candidates 1 and 2 on the review page and compare them; the comparison's section."""
    page.goto(series_url(live_server, COMPARED))
    chosen = page.locator('input[name="choice"]:checked').get_attribute("value")
    page.locator('[data-compare-pick][value="1"]').check()
    page.locator('[data-compare-pick][value="2"]').check()
    # ticking for comparison leaves the candidate picked for the decision alone
    assert page.locator('input[name="choice"]:checked').get_attribute("value") == chosen
    page.click("[data-compare-button]")
    result = page.locator("#comparison [data-comparison-result]")
    result.wait_for(timeout=CHECK_TIMEOUT_MS)
    result.locator("#chart-forecast-comparison .scatterlayer .js-fill").first.wait_for()
    return result


def test_two_candidates_compared_on_one_chart_with_shared_axes(page, live_server):
    result = compare_two(page, live_server)
    axes = page.evaluate(AXES)
    assert axes["x"] == axes["x2"] and axes["y"] == axes["y2"] and not axes["hasThird"]
    assert axes["panels"][1][1] < axes["panels"][0][0]  # one panel above the other
    candidates = api(live_server, f"/api/series/{quote(COMPARED, safe='/')}")["candidates"][:2]
    query = urlencode({"order": [",".join(map(str, c["order"])) for c in candidates],
                       "seasonal_order": [",".join(map(str, c["seasonal_order"])) for c in candidates]}, doseq=True)
    checks = api(live_server, f"/api/series/{quote(COMPARED, safe='/')}/compare?{query}")["checks"]
    for candidate, check in zip(candidates, checks):
        row = result.locator(f'[data-compared="{order_key(candidate)}"]')
        assert row.locator("[data-compared-mase]").inner_text() == f"{check['mase']:.3f}"
        for level in ("80", "95"):
            assert row.locator(f'[data-compared-coverage="{level}"]').inner_text() == f"{100 * check['coverage'][level]:.0f}%"
        assert any(text.startswith(f"{check['label']} · MASE {check['mase']:.3f}") for text in axes["legend"]), axes["legend"]
        # the candidate table's forecast-score column has the score now
        assert page.locator(f'[data-mase-for="{order_key(candidate)}"]').inner_text() == f"{check['mase']:.3f}"
    ARTIFACTS.mkdir(exist_ok=True)
    page.locator("#comparison").screenshot(path=str(ARTIFACTS / "compare-sugar-kg.png"))
    page.locator("#candidates").screenshot(path=str(ARTIFACTS / "compare-candidates.png"))
    assert_served_locally(page, live_server)


def test_at_most_three_candidates_can_be_ticked(page, live_server):
    page.goto(series_url(live_server, COMPARED))
    boxes = page.locator("[data-compare-pick]")
    assert boxes.count() > 3
    button = page.locator("[data-compare-button]")
    boxes.nth(0).check()
    assert button.is_disabled()
    boxes.nth(1).check()
    boxes.nth(2).check()
    assert button.is_enabled() and boxes.nth(3).is_disabled()
    boxes.nth(2).uncheck()
    assert boxes.nth(3).is_enabled()
    assert not page.errors


def test_parameter_header_stays_above_its_rows_after_a_forecast_check(page, live_server):
    page.goto(series_url(live_server, COMPARED))
    detail = page.locator('#candidate-detail [data-candidate-detail="1"]')
    detail.locator("[data-forecast-check]").click()
    detail.locator("[data-forecast-result]").wait_for(timeout=CHECK_TIMEOUT_MS)
    # Scroll the table's top just past the top of the window: a header that follows the page
    # down would now lie over its rows.
    found = page.evaluate("""() => {
      const table = document.querySelector('[data-candidate-detail="1"] .params-table');
      window.scrollTo(0, table.getBoundingClientRect().top + window.scrollY + 20);
      const head = table.querySelector('thead th').getBoundingClientRect();
      const rows = Array.from(table.querySelectorAll('tbody tr')).map(r => r.getBoundingClientRect().top);
      return {headBottom: head.bottom, firstRow: rows[0], position: getComputedStyle(table.querySelector('thead th')).position};
    }""")
    assert found["headBottom"] <= found["firstRow"] + 1, found
    ARTIFACTS.mkdir(exist_ok=True)
    page.screenshot(path=str(ARTIFACTS / "compare-params-header.png"))


def chart_box(page, chart_id: str) -> dict:
    locator = page.locator(f"#{chart_id}")
    locator.locator(".main-svg").first.wait_for()
    box = locator.bounding_box()
    assert box is not None
    return box


def test_wide_screen_puts_charts_in_two_columns(browser, live_server):
    context = browser.new_context(viewport={"width": 1920, "height": 1200})
    page = context.new_page()
    try:
        page.goto(series_url(live_server, COMPARED))
        acf, pacf = chart_box(page, "chart-acf"), chart_box(page, "chart-pacf")
        assert abs(acf["y"] - pacf["y"]) < 2 and pacf["x"] >= acf["x"] + acf["width"]
        residual_acf, residuals = chart_box(page, "chart-resid-acf-1"), chart_box(page, "chart-resid-1")
        assert abs(residual_acf["y"] - residuals["y"]) < 40 and residuals["x"] >= residual_acf["x"] + residual_acf["width"]
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "wide-review.png"), full_page=True)
    finally:
        context.close()


def test_below_the_wide_width_the_correlograms_stack(page, live_server):
    page.goto(series_url(live_server, COMPARED))
    acf, pacf = chart_box(page, "chart-acf"), chart_box(page, "chart-pacf")
    assert pacf["y"] >= acf["y"] + acf["height"]


def test_dark_scheme_follows_the_system_setting_in_the_page_and_its_charts(browser, live_server):
    context = browser.new_context(viewport={"width": 1440, "height": 1000}, color_scheme="dark")
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda error: errors.append(str(error)))
    try:
        result = compare_two(page, live_server)
        colours = page.evaluate("""() => ({
          background: getComputedStyle(document.body).backgroundColor,
          tick: getComputedStyle(document.querySelector('#chart-acf .xtick text')).fill,
          paper: getComputedStyle(document.querySelector('#chart-acf .main-svg')).backgroundColor,
        })""")
        assert colours["background"] == DARK_BACKGROUND
        assert colours["tick"] == DARK_CHART_INK
        assert colours["paper"] in ("rgba(0, 0, 0, 0)", "transparent")
        ARTIFACTS.mkdir(exist_ok=True)
        page.screenshot(path=str(ARTIFACTS / "dark-review.png"), full_page=True)
        result.screenshot(path=str(ARTIFACTS / "dark-compare.png"))
        assert not errors
    finally:
        context.close()

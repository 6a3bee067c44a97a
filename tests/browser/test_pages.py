"""Every dashboard page in a real browser: loads without console errors, charts drawn (their SVG exists), a
screenshot saved under test-artifacts/, uploaded HTML shown as text with no dialog, and the interactive bits
(filters, quarantine through the UI, chart PNG export, live import progress).

Pages built in other issues are tested when their URL names exist and skipped with the reason otherwise.
"""

from __future__ import annotations

import json
import urllib.request

import pytest
from django.urls import NoReverseMatch, reverse

from analytics.views.forecasts import SHEET_WEEKS
from tests.browser.conftest import screenshot
from tests.browser.demo_site import ADMIN, XSS, XSS_CLASS, XSS_COMPONENT, big_report

# PNG signature: ISO/IEC 15948 (PNG), section 5.2: the first eight bytes are 137 80 78 71 13 10 26 10.
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _path(name: str, **kwargs) -> str:
    try:
        return reverse(name, kwargs=kwargs)
    except NoReverseMatch:
        pytest.skip(f"page {name!r} is not mounted in this build (its URL name does not resolve yet)")


def _open(page, site, path: str):
    response = page.goto(site.page_url(path))
    assert response is not None and response.status == 200, f"{path}: HTTP {response and response.status}"
    page.wait_for_load_state("load")
    return page


def _charts_drawn(page) -> int:
    """Number of plotly charts on the page; each must have its SVG drawn."""
    charts = page.locator(".js-plotly-plot")
    count = charts.count()
    for i in range(count):
        assert charts.nth(i).locator("svg.main-svg").count() > 0, f"chart {i} has no SVG"
    return count


def _clean(page) -> None:
    assert page.watch.errors == [], page.watch.errors
    assert page.watch.dialogs == [], f"a dialog opened: {page.watch.dialogs}"
    assert page.locator('img[src="x"]').count() == 0  # the payload never became an element


# --------------------------------------------------------------------------------------------------- sign in
def test_root_asks_to_sign_in_then_opens_this_week(browser, site):
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    page = context.new_page()
    page.goto(site.page_url("/"))
    assert "/accounts/login/" in page.url
    screenshot(page, "login")
    page.fill("#id_username", ADMIN[0])
    page.fill("#id_password", ADMIN[1])
    page.click("button[type=submit]")
    page.wait_for_url(f"**/p/{site.slug}/")
    assert page.locator("h1").inner_text().startswith("This week")
    # the project switcher goes through "/" and lands on the chosen project's page
    _open(page, site, _path("imports", slug=site.slug))
    with page.expect_navigation():
        page.select_option("#project-switch", site.slug)
    assert page.url.endswith(f"/p/{site.slug}/")
    context.close()


# --------------------------------------------------------------------------------------------------- this week
def test_this_week_page(admin_page, site):
    page = _open(admin_page, site, _path("overview", slug=site.slug))
    assert _charts_drawn(page) == 4
    assert page.locator("#figures .card").count() == 10
    screenshot(page, "this-week-1280")
    # the payload-named component is in the stacked chart's legend as text, and in the component filter
    legend = page.locator("#component-failures-chart .legendtext").evaluate_all("els => els.map(e => e.textContent)")
    assert XSS_COMPONENT in legend
    assert XSS_COMPONENT in page.locator("#component-filter option").all_inner_texts()
    _clean(page)
    page.set_viewport_size({"width": 390, "height": 844})  # plotly's responsive mode redraws on resize
    page.wait_for_timeout(500)
    assert _charts_drawn(page) == 4
    screenshot(page, "this-week-390")
    _clean(page)


def test_week_picker_and_component_filter(admin_page, site):
    page = _open(admin_page, site, _path("overview", slug=site.slug))
    weeks = page.locator("#week-picker option")
    earlier = weeks.nth(1).get_attribute("value")
    page.select_option("#week-picker", earlier)
    page.select_option("#component-filter", label=XSS_COMPONENT)
    page.click("form.filters button[type=submit]")
    page.wait_for_load_state("load")
    assert f"week={earlier}" in page.url
    assert XSS_COMPONENT in page.locator("h1").inner_text()  # shown as text in the heading
    assert _charts_drawn(page) == 4
    _clean(page)


def test_a_figure_leads_to_its_rows_and_they_show_the_payload_as_text(admin_page, site):
    page = _open(admin_page, site, _path("overview", slug=site.slug))
    page.select_option("#component-filter", label=XSS_COMPONENT)
    page.click("form.filters button[type=submit]")
    page.wait_for_load_state("load")
    page.click("#figure-tests a.card-link")
    page.wait_for_load_state("load")
    assert "/rows/tests/" in page.url
    assert XSS in page.locator("#rows-table").inner_text()
    screenshot(page, "this-week-rows")
    _clean(page)


# --------------------------------------------------------------------------------------------------- imports
def test_builds_and_imports_pages(admin_page, site):
    page = _open(admin_page, site, _path("imports", slug=site.slug))
    assert page.locator("#builds-table tbody tr").count() > 1
    screenshot(page, "imports")
    _clean(page)
    page.fill("#f-q", "xss-1")
    page.click("form.filters button[type=submit]")
    page.wait_for_load_state("load")
    page.click("#builds-table tbody a")
    page.wait_for_load_state("load")
    assert XSS in page.locator("#results-table").inner_text()
    screenshot(page, "build-detail")
    _clean(page)
    _open(page, site, _path("import-jobs", slug=site.slug))
    page.click("#jobs-table tbody a >> nth=0")
    page.wait_for_load_state("load")
    screenshot(page, "import-job")
    _clean(page)


def test_defect_upload_preview_and_mapping_pages(admin_page, site, tmp_path):
    export = tmp_path / "desk.csv"
    export.write_text(f'Ticket No,Headline,Opened On,State\nBW-9001,"{XSS}",2026-11-20T10:00:00Z,New\n')
    page = _open(admin_page, site, _path("defects-upload", slug=site.slug))
    page.set_input_files("#f-file", str(export))
    page.click("#upload-form button[type=submit]")
    page.wait_for_load_state("load")
    assert XSS in page.locator("#raw-rows").inner_text()
    page.select_option("#f-field-key", "Ticket No")
    page.select_option("#f-field-title", "Headline")
    page.select_option("#f-field-created", "Opened On")
    page.click("button[value=preview]")
    page.wait_for_load_state("load")
    assert XSS in page.locator("#mapped-rows").inner_text()
    screenshot(page, "defect-mapping")
    page.click("#import-button")
    page.wait_for_load_state("load")
    page.wait_for_function("document.querySelector('[data-role=status]').textContent.trim() === 'done'")
    _clean(page)


def test_an_import_shows_progress_then_done_without_reload(admin_page, site):
    """Upload a large report through the API, open the imports page while it runs, watch it finish."""
    body, boundary = _multipart({"build": "bulk-1", "started": "2026-11-28T08:00:00Z"},
                                ("files", "bulk.xml", big_report(20_000)))
    request = urllib.request.Request(
        site.page_url(f"/api/v1/projects/{site.slug}/results/"), data=body, method="POST",
        headers={"Authorization": f"Bearer {site.token}", "Content-Type": f"multipart/form-data; boundary={boundary}"})
    with urllib.request.urlopen(request, timeout=60) as response:
        assert response.status == 202
        job_id = json.loads(response.read())["id"]
    page = _open(admin_page, site, _path("imports", slug=site.slug))
    row = page.locator(f'tr.job[data-job="{job_id}"]')
    first_status = row.locator("[data-role=status]").inner_text()
    assert first_status in ("queued", "running"), f"the import had already ended ({first_status}): make it larger"
    page.evaluate("window.__stayed = true")  # disappears if the page reloads
    seen = page.evaluate_handle("[]")
    page.evaluate("""([id, seen]) => { const bar = document.querySelector(`tr.job[data-job="${id}"] [data-role=bar]`);
        new MutationObserver(() => seen.push(bar.value)).observe(bar, {attributes: true, childList: true}); }""",
                  [job_id, seen])
    screenshot(page, "import-running")
    page.wait_for_function(
        f"document.querySelector('tr.job[data-job=\"{job_id}\"] [data-role=status]').textContent.trim() === 'done'",
        timeout=90_000)
    assert page.evaluate("window.__stayed") is True
    assert row.locator("[data-role=bar]").evaluate("b => b.value") == 1
    assert row.locator("[data-role=percent]").inner_text() == "100 %"
    _clean(page)


def _multipart(fields: dict, file: tuple[str, str, bytes]) -> tuple[bytes, str]:
    boundary = "barometer-browser-test-boundary"
    parts = []
    for key, value in fields.items():
        parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{key}"\r\n\r\n{value}\r\n'.encode())
    name, filename, data = file
    parts.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{name}"; filename="{filename}"\r\n'
                 f"Content-Type: application/xml\r\n\r\n".encode() + data + b"\r\n")
    parts.append(f"--{boundary}--\r\n".encode())
    return b"".join(parts), boundary


# --------------------------------------------------------------------------------------------------- others' pages
def test_flaky_list_filters_and_shows_the_payload_as_text(admin_page, site):
    page = _open(admin_page, site, _path("flaky-list", slug=site.slug))
    table = page.locator("#flaky-table tbody tr")
    before = table.count()
    _charts_drawn(page)
    screenshot(page, "flaky-list")
    _clean(page)
    page.fill("#f-q", "onerror")
    page.click("form.filters button[type=submit]")
    page.wait_for_load_state("load")
    assert 0 < table.count() < before  # the text filter narrows the table
    assert XSS in page.locator("#flaky-table").inner_text()
    _clean(page)


def test_quarantine_through_the_page_reaches_the_quarantine_endpoint(admin_page, site):
    list_path = _path("flaky-list", slug=site.slug)
    page = _open(admin_page, site, list_path + "?q=onerror")
    page.click("#flaky-table tbody a >> nth=0")
    page.wait_for_load_state("load")
    _charts_drawn(page)
    assert XSS in page.locator("h1").inner_text()
    screenshot(page, "flaky-detail")
    _clean(page)
    page.fill("#triage-note", "quarantined by the browser test")
    page.click("#triage-form button[value=quarantine]")
    page.wait_for_load_state("load")
    _clean(page)
    text = page.request.get(site.page_url(_path("api-quarantine", slug=site.slug) + "?format=txt")).text()
    assert any(line.startswith(XSS_CLASS + "::") for line in text.splitlines()), text


def test_failure_causes_pages(admin_page, site):
    page = _open(admin_page, site, _path("causes-list", slug=site.slug))
    _charts_drawn(page)
    screenshot(page, "causes-list")
    _clean(page)
    first = page.locator("main table tbody a")
    # The demo plants failure causes (demo ground truth), so the list is never empty.
    assert first.count() > 0, "the failure causes list is empty"
    first.first.click()
    page.wait_for_load_state("load")
    assert page.url != site.page_url(_path("causes-list", slug=site.slug)), "the link did not open a cause"
    assert _charts_drawn(page) >= 1  # the cause's failures-per-week chart
    screenshot(page, "causes-detail")
    _clean(page)


def test_forecasts_page_and_png_export(admin_page, site):
    page = _open(admin_page, site, _path("forecasts", slug=site.slug))
    assert _charts_drawn(page) >= 1
    screenshot(page, "forecasts")
    _clean(page)
    link = page.locator("a[download]", has_text="PNG").first
    with page.expect_download(timeout=60_000) as info:
        link.click()
    data = open(info.value.path(), "rb").read()
    assert data[:8] == PNG_SIGNATURE
    # IHDR follows the signature (ISO/IEC 15948 §11.2.2): width and height are 4-byte big-endian integers
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    assert width >= 400 and height >= 200, (width, height)


def test_printable_planning_sheet(admin_page, site):
    page = _open(admin_page, site, _path("forecasts-sheet", slug=site.slug))
    # The series come from the forecasts API (over the sheet's longest outlook), not from the sheet itself.
    query = f"?horizon_weeks={max(SHEET_WEEKS)}"
    api = page.request.get(site.page_url(_path("api-forecasts", slug=site.slug) + query))
    assert api.status == 200, api.text()
    series = api.json()["series"]
    assert series
    assert _charts_drawn(page) == len(series)
    assert page.locator(".sheet-card .js-plotly-plot").count() == len(series)
    assert page.locator(".sheet-card h2").count() == len(series)
    # The reduced demo has few components: everything fits on one page, so no "next page" note.
    assert page.get_by_text("more than fit on one printed page").count() == 0
    page.emulate_media(media="print")
    screenshot(page, "forecasts-sheet-print")
    _clean(page)

"""The planner pages in a real browser (Playwright driving Debian's chromium at
/usr/bin/chromium; `.ci/run` installs it, nothing is downloaded by Playwright): a planner
logs in and clicks through home → site → CT → procedure (walks the steps with the keys and
the slider, each step's drawing fetched as it is shown) → builder (adds steps, sees the
verdict change) → device plan → work sheet (the PDF's text is read back). Each page is saved
as a screenshot that is checked for size and content. Marked ``browser``: CI runs these in
its SQLite pass only (.ci/run)."""

from __future__ import annotations

import io
import os
import re
from pathlib import Path

import pytest
from PIL import Image, ImageStat

from tests.conftest import _missing
from tests.pages.conftest import demo_doc, make_user

CHROMIUM = Path(os.environ.get("LOOPKEEP_CHROMIUM", "/usr/bin/chromium"))
PASSWORD = "browser-test-password"

pytestmark = [pytest.mark.browser, pytest.mark.django_db(transaction=True)]


@pytest.fixture(scope="module")
def chromium():
    if not CHROMIUM.exists():
        _missing(f"needs Debian's chromium at {CHROMIUM} (apt-get install chromium)")
    from playwright.sync_api import sync_playwright

    # Playwright's sync API runs an event loop in this thread; the test's own database
    # calls are plain synchronous calls between its steps. The variable is set for these
    # tests only (a later `check --deploy` in the same process must not see it).
    before = os.environ.get("DJANGO_ALLOW_ASYNC_UNSAFE")
    os.environ["DJANGO_ALLOW_ASYNC_UNSAFE"] = "true"
    try:
        with sync_playwright() as playwright:
            browser = playwright.chromium.launch(
                executable_path=str(CHROMIUM), args=["--no-sandbox", "--disable-dev-shm-usage"]
            )
            yield browser
            browser.close()
    finally:
        if before is None:
            os.environ.pop("DJANGO_ALLOW_ASYNC_UNSAFE", None)
        else:
            os.environ["DJANGO_ALLOW_ASYNC_UNSAFE"] = before


@pytest.fixture
def shots(tmp_path_factory) -> Path:
    """Where the screenshots go: LOOPKEEP_SCREENSHOTS when set (to keep them), else a tmp dir."""
    folder = os.environ.get("LOOPKEEP_SCREENSHOTS")
    path = Path(folder) if folder else tmp_path_factory.mktemp("screenshots")
    path.mkdir(parents=True, exist_ok=True)
    return path


@pytest.fixture
def quillfen(transactional_db):
    """The Quillfen demo site; in a transactional test its recompute runs on commit."""
    from inventory.services import site_import

    site_import(doc=demo_doc("quillfen"))


def check_screenshot(path: Path) -> None:
    """A real picture of a page: a PNG of some size with more than a blank background."""
    data = path.read_bytes()
    assert len(data) > 20_000, f"{path.name}: {len(data)} bytes"
    image = Image.open(io.BytesIO(data)).convert("L")
    assert image.size[0] >= 1000 and image.size[1] >= 700
    assert ImageStat.Stat(image).stddev[0] > 10, f"{path.name} looks blank"
    assert len(image.getcolors(maxcolors=1 << 16) or range(1 << 16)) > 20


def test_a_planner_clicks_through_the_pages(chromium, live_server, quillfen, shots):
    from playwright.sync_api import expect
    from pypdf import PdfReader

    # generous waits: the machine may be busy (nothing here measures speed)
    expect.set_options(timeout=30_000)
    make_user("editor", username="planner", password=PASSWORD)
    context = chromium.new_context(viewport={"width": 1280, "height": 900})
    context.set_default_timeout(30_000)
    page = context.new_page()
    saved: list[Path] = []

    def settled() -> None:
        """No htmx request in flight and no swap settling (the next event reaches the page
        as it will stay)."""
        page.wait_for_function(
            "!document.querySelector('.htmx-request, .htmx-swapping, .htmx-settling')"
        )

    def shot(name: str) -> None:
        path = shots / f"{name}.png"
        page.screenshot(path=str(path))
        saved.append(path)

    # anonymous: only the login page; the keyboard logs in
    page.goto(live_server.url + "/")
    expect(page).to_have_url(re.compile(r"/login/\?next=/$"))
    shot("01-login")
    page.fill("#id_username", "planner")
    page.fill("#id_password", PASSWORD)
    page.press("#id_password", "Enter")

    # home: the site with its counts
    expect(page.locator("h1")).to_have_text("Sites")
    row = page.locator("tr", has_text="Quillfen")
    expect(row).to_contain_text("27")  # CTs (fixtures/demo/README.md)
    expect(row).to_contain_text("(3 unsafe)")
    shot("02-home")

    # site: buses, procedures with their verdict; the findings filter swaps the table (htmx)
    page.get_by_role("link", name="QFN", exact=True).click()
    expect(page.locator("h1")).to_contain_text("Quillfen")
    expect(page.locator("#buses + table")).to_contain_text("B115")
    expect(page.locator("#procedures + table tr", has_text="P-R133-OUT-DRAFT")).to_contain_text(
        "UNSAFE"
    )
    page.select_option("#findings select[name=severity]", "danger")
    expect(page).to_have_url(re.compile(r"severity=danger"))
    marks = page.locator("#findings tbody .sev")
    expect(marks.first).to_contain_text("DANGER")
    assert set(marks.all_inner_texts()) == {"▲ DANGER"}
    shot("03-site")

    # CT: ratio, tap history, report and both plots drawn
    page.locator("#cts + table").get_by_role("link", name="CB-131-A").click()
    expect(page.locator("h1")).to_have_text("CT CB-131-A")
    expect(page.locator("main")).to_contain_text("ratio 1200:5")
    expect(page.locator("main")).to_contain_text("(over 20)")
    for img in page.locator(".plots img").all():
        img.scroll_into_view_if_needed()
        expect(img).to_have_js_property("complete", True)
        assert img.evaluate("i => i.naturalWidth") > 100
    shot("04-ct")

    # procedure: the first danger at the top, the walk starts there; keys and slider move it
    page.goto(live_server.url + "/sites/QFN/")
    page.locator("#procedures + table").get_by_role("link", name="P-R133-OUT-DRAFT").click()
    banner = page.locator("#verdict")
    expect(banner).to_contain_text("UNSAFE")
    expect(banner).to_contain_text("step 3")
    expect(banner).to_contain_text("open_secondary")
    walker = page.locator("[data-steps]")
    expect(walker).to_have_attribute("data-current-step", "3")
    expect(page.locator("[data-step-detail='3']")).to_be_visible()
    expect(page.locator("[data-step-detail='3'] svg")).to_contain_text("OPEN SECONDARY")
    expect(page.locator("[data-step-detail='2']")).to_be_hidden()
    shot("05-procedure")
    page.locator("body").press("ArrowLeft")
    expect(walker).to_have_attribute("data-current-step", "2")
    expect(page.locator("tr#step-2")).to_have_class(re.compile("current"))
    # only step 3 was drawn into the page; step 2's drawing is fetched (htmx) when shown
    expect(page.locator("[data-step-detail='2'] svg")).to_be_visible()
    expect(page.locator("[data-step-detail='2'] svg")).to_contain_text("TS-133")
    page.locator("body").press("Home")
    expect(walker).to_have_attribute("data-current-step", "0")
    expect(page.locator("[data-step-detail='0'] svg")).to_be_visible()
    page.locator("body").press("End")
    last = page.locator("[data-step-slider]").get_attribute("max")
    expect(walker).to_have_attribute("data-current-step", last)
    expect(page.locator(f"[data-step-detail='{last}'] svg")).to_be_visible()
    page.locator("[data-step-slider]").fill("1")
    expect(walker).to_have_attribute("data-current-step", "1")
    page.get_by_role("button", name="next step").click()
    expect(walker).to_have_attribute("data-current-step", "2")
    expect(page.locator(".cautions")).to_contain_text("not a switching order")

    # builder: pick from lists; each change is checked as a draft
    page.goto(live_server.url + "/sites/QFN/builder/?device=R-132")
    expect(page.locator("#draft-verdict")).to_contain_text("Nothing to check yet")
    # by keyboard: the list swapped in by htmx keeps the focus, Tab reaches "Add step"
    settled()
    page.focus("#pick-switch")
    page.keyboard.press("ArrowDown")
    expect(page.locator("#pick-position")).not_to_have_value("")
    expect(page.locator("#pick-switch")).to_be_focused()
    page.keyboard.press("Tab")
    page.keyboard.press("Tab")
    expect(page.locator("#add-step")).to_be_focused()
    page.keyboard.press("Enter")
    expect(page.locator("ol.draft-steps li")).to_have_count(1)
    page.get_by_role("button", name="remove step 1").click()
    expect(page.locator("#draft-verdict")).to_contain_text("Nothing to check yet")
    for switch in ("TS-132/T1", "TS-132/T2"):
        settled()
        page.select_option("select[name=switch]", switch)
        expect(page.locator("select[name=position] option[value=open]")).to_have_count(1)
        settled()
        page.select_option("select[name=position]", "open")
        page.locator("#add-step").click()
        expect(page.locator("ol.draft-steps")).to_contain_text(f"set {switch} to open")
    expect(page.locator("#draft-verdict .banner")).to_contain_text("SAFE")
    settled()
    page.select_option("select[name=switch]", "TS-132/N")
    expect(page.locator("select[name=position] option[value=open]")).to_have_count(1)
    settled()
    page.select_option("select[name=position]", "open")
    page.locator("#add-step").click()
    expect(page.locator("#draft-verdict .banner")).to_contain_text("UNSAFE")
    expect(page.locator("#draft-verdict .banner")).to_contain_text("open_secondary")
    shot("06-builder")

    # device: found by the search box, its plan with each step's why and readings
    page.fill("#q", "r-132")
    page.press("#q", "Enter")
    expect(page.locator("h1")).to_have_text("Relay R-132")
    expect(page.locator("main")).to_contain_text("PLAN FOUND")
    expect(page.locator("tr#step-1")).to_contain_text("before any CT circuit is touched")
    expect(page.locator("#collateral + table")).to_contain_text("XD-132")
    # the plan's step 1 drawing is fetched (htmx) when the walk reaches it
    page.locator("body").press("ArrowRight")
    expect(page.locator("[data-step-detail='1'] svg")).to_be_visible()
    shot("07-device-plan")

    # work sheet: the PDF behind the link, read back
    href = page.locator("#plan-worksheet").get_attribute("href")
    response = context.request.get(live_server.url + href)
    assert response.status == 200 and response.headers["content-type"] == "application/pdf"
    reader = PdfReader(io.BytesIO(response.body()))
    sheet = " ".join(" ".join(p.extract_text() for p in reader.pages).split())
    assert "device R-132" in sheet and "TS-132/T1" in sheet and "not a switching order" in sheet

    # and an unsafe procedure prints no sheet: the page says why
    page.goto(live_server.url + "/sites/QFN/procedures/P-R133-OUT-DRAFT/worksheet.pdf")
    expect(page.locator("main")).to_contain_text("NOT PRINTED")
    expect(page.locator("main")).to_contain_text("step 3")
    shot("08-worksheet-refused")

    context.close()
    assert [p.name for p in saved] == [f"{n}.png" for n in SCREENSHOTS]
    for path in saved:
        check_screenshot(path)


SCREENSHOTS = (
    "01-login",
    "02-home",
    "03-site",
    "04-ct",
    "05-procedure",
    "06-builder",
    "07-device-plan",
    "08-worksheet-refused",
)

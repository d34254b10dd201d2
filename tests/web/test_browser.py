"""A real browser: gunicorn on a free loopback port, Debian's Chromium headless through Playwright.

Skipped only when Chromium or Playwright is missing *and* ``CI`` is unset; in CI that is a failure.
"""

from __future__ import annotations

import datetime as dt
import io
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest
import requests

from service import schedule
from service.config import load_settings

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[2]
ARTIFACTS = ROOT / "tests" / "artifacts"
CHROMIUM = Path("/usr/bin/chromium")
BIN = Path(sys.executable).parent
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
SITE = "HV-GAR-02"
TRUCK = "HV-R1"
OTHER_TRUCK = "HV-R2"
EMPTY_SITE = "HV-HTG-06"  # read 0 L


def _missing(reason: str) -> None:
    if os.environ.get("CI"):
        pytest.fail(f"the browser test must run in CI: {reason}")
    pytest.skip(reason)


def _free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


def _cli(env: dict[str, str], *args: str) -> str:
    done = subprocess.run([str(BIN / "ullage"), *args], env=env, cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    return done.stdout


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory):
    """A prepared SQLite file (migrated, demo, a token, an active plan per truck, readings, one of
    them 0 L) and gunicorn serving it."""
    if not CHROMIUM.exists():
        _missing("/usr/bin/chromium is not installed (apt-get install chromium chromium-driver)")
    try:
        import playwright.sync_api  # noqa: F401, PLC0415
    except ImportError:
        _missing("the playwright package is not installed")
    workdir = tmp_path_factory.mktemp("browser")
    env = {
        **os.environ,
        "DATABASE_URL": f"sqlite:///{workdir / 'ullage.db'}",
        "ULLAGE_SECRET_KEY": "browser-test-key",
        "LOG_LEVEL": "WARNING",
    }
    env.pop("TEST_POSTGRES_URL", None)
    _cli(env, "db", "upgrade")
    _cli(env, "demo")
    token = _cli(env, "token", "create", "browser-dispatcher", "--role", "dispatcher").strip().splitlines()[-1]
    port = _free_port()
    log = open(workdir / "gunicorn.log", "w")  # noqa: SIM115 - closed below
    process = subprocess.Popen(
        [str(BIN / "gunicorn"), "-w", "1", "-b", f"127.0.0.1:{port}", "service.app:create_app()"],
        env=env,
        cwd=workdir,
        stdout=log,
        stderr=subprocess.STDOUT,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        probe = requests.Session()
        probe.trust_env = False  # loopback only, never through a proxy from the environment
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if process.poll() is not None:
                pytest.fail(f"gunicorn exited: {(workdir / 'gunicorn.log').read_text()}")
            try:
                if probe.get(f"{base}/livez", timeout=5).status_code == 200:
                    break
            except requests.RequestException:
                time.sleep(0.2)
        else:
            pytest.fail("gunicorn did not answer")
        api = requests.Session()
        api.trust_env = False
        api.headers["Authorization"] = f"Bearer {token}"
        # Issue 16: the demo's trucks start from depots, so their trips are routed and drawn.
        assert api.get(f"{base}/api/v1/trucks/{TRUCK}", timeout=30).json()["depot"] is not None
        for truck in (TRUCK, OTHER_TRUCK):
            created = api.post(f"{base}/api/v1/trucks/{truck}/plans", json={}, timeout=30)
            assert created.status_code == 201, created.text
            activated = api.post(f"{base}/api/v1/plans/{created.json()['id']}/activate", timeout=30)
            assert activated.status_code == 200, activated.text
        now = dt.datetime.now(dt.UTC) - dt.timedelta(hours=20)  # read yesterday, before today's trip
        for site, level in (
            ("HV-GAR-02", 300.0),
            ("HV-DEP-01", 31000.0),
            ("HV-GAR-03", 5200.0),
            (EMPTY_SITE, 0.0),
            ("HV-IND-07", 9000.0),
            ("HV-MAR-08", 2500.0),
        ):
            reading = api.post(
                f"{base}/api/v1/sites/{site}/readings",
                json={"level": level, "measured_at": now.isoformat()},
                timeout=30,
            )
            assert reading.status_code == 201, reading.text
        yield {"base": base, "token": token, "api": api, "env": env}
    finally:
        process.terminate()
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()
        log.close()


def test_sign_in_week_trips_and_site_chart_in_chromium(server):
    from playwright.sync_api import sync_playwright  # noqa: PLC0415

    base, api = server["base"], server["api"]
    today = schedule.today(load_settings(environ=server["env"]))
    year, week, _ = today.isocalendar()
    week_text = f"{year}-W{week:02d}"
    trips = api.get(f"{base}/api/v1/trucks/{TRUCK}/trips", params={"week": week_text}, timeout=30).json()["trips"]
    window = api.get(
        f"{base}/api/v1/trucks/{TRUCK}/trips",
        timeout=30,
        params={"from": today.isoformat(), "to": (today + dt.timedelta(days=27)).isoformat()},
    ).json()
    expected = sum(1 for trip in window["trips"] for stop in trip["stops"] if stop["site"] == SITE)
    assert expected > 0
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    problems: list[str] = []

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            context = browser.new_context(viewport={"width": 1366, "height": 900}, java_script_enabled=False)
            page = context.new_page()
            page.on(
                "console",
                lambda message: problems.append(message.text) if message.type in ("error", "warning") else None,
            )
            page.on("requestfailed", lambda request: problems.append(f"failed: {request.url}"))

            page.goto(f"{base}/status")
            assert "/status/sign-in" in page.url
            page.fill("#token", server["token"])
            page.click("button[type=submit]")
            page.wait_for_load_state()
            assert page.url.rstrip("/").endswith("/status")
            assert page.locator("h1").inner_text().startswith(f"Week {week_text}")
            # The stylesheet loaded under the CSP.
            assert page.locator("header.top").evaluate("e => getComputedStyle(e).display") == "flex"

            # Warnings first, then the week's trips.
            assert page.locator(".warnings-card").is_visible()
            assert page.locator(".warning").count() >= 2
            assert "Run-out risk" in page.locator(".warnings").inner_text()
            panel = page.locator("section.truck").filter(has=page.locator("h2", has_text=TRUCK))
            table = panel.locator("table.trips")
            assert page.locator("table.trips").count() == 2 and table.count() == 1
            rows = table.locator("tbody tr")
            assert rows.count() == len(trips) > 0
            for index, trip in enumerate(trips):
                row = rows.nth(index)
                assert trip["date"] in row.locator("th").inner_text()
                codes = row.locator(".stops .code").all_inner_texts()
                # Issue 16: a routed trip lists its stops in driving order beside its SVG route map.
                assert trip["route"] is not None
                assert codes == trip["route"]["stops"]
                route_map = row.locator("svg.route-map")
                assert route_map.is_visible() and route_map.locator(".stop-mark").count() == len(codes)
                assert route_map.bounding_box()["width"] > 100  # type: ignore[index]
            assert page.locator("svg.level-chart").count() == 16
            page.screenshot(path=str(ARTIFACTS / "status-overview.png"), full_page=True)

            # Tablet width: nothing overflows sideways.
            page.set_viewport_size({"width": 820, "height": 1180})
            assert page.evaluate("document.documentElement.scrollWidth <= window.innerWidth + 1")
            page.screenshot(path=str(ARTIFACTS / "status-overview-tablet.png"), full_page=False)
            page.set_viewport_size({"width": 1366, "height": 900})

            # A site's page: one marker per planned delivery in the 28 days.
            page.click(f".mini a[href='/status/sites/{SITE}']")
            page.wait_for_load_state()
            assert page.url.endswith(f"/status/sites/{SITE}")
            chart = page.locator("figure.chart svg")
            assert chart.count() == 1
            assert chart.locator(".delivery-marker").count() == expected
            assert chart.locator(".level-line").count() >= 1
            assert chart.locator(".safe-fill-line").count() == 1 and chart.locator(".safety-stock-line").count() == 1
            assert "planning aid" in page.locator(".caution").inner_text()
            page.screenshot(path=str(ARTIFACTS / "status-site.png"), full_page=True)

            # Sign out through the form.
            page.click("header form.who button")
            page.wait_for_load_state()
            assert "/status/sign-in" in page.url
            page.goto(f"{base}/status")
            assert "/status/sign-in" in page.url
        finally:
            browser.close()
    assert not [m for m in problems if "Content Security Policy" in m or "failed:" in m], problems
    assert os.path.getsize(ARTIFACTS / "status-overview.png") > 10_000


def _signed_in(browser, base: str, token: str):
    """A new page (1366 × 900, no JavaScript) signed in to the status page with ``token``."""
    context = browser.new_context(viewport={"width": 1366, "height": 900}, java_script_enabled=False)
    page = context.new_page()
    page.goto(f"{base}/status")
    page.fill("#token", token)
    page.click("button[type=submit]")
    page.wait_for_load_state()
    return page


def _non_blank(path: Path) -> None:
    """The picture shows something: its grey levels vary (a blank page has one level, variance 0)."""
    from PIL import Image, ImageStat  # noqa: PLC0415

    with Image.open(path) as image:
        grey = image.convert("L")
        assert grey.width > 300 and grey.height > 300, grey.size
        assert ImageStat.Stat(grey).var[0] > 100, f"{path.name} looks blank"


def _pdf_pages(pdf: bytes) -> list[str]:
    """The text of each page of a PDF."""
    from pypdf import PdfReader  # noqa: PLC0415

    return [" ".join((page.extract_text() or "").split()) for page in PdfReader(io.BytesIO(pdf)).pages]


def test_latest_readings_lowest_first_and_load_sheets_print_one_a4_page_per_truck(server):
    """The morning views in Chromium: the overview's latest readings (the 0 L tank plainly), the
    lowest-first view, and the load sheets printed to PDF: one A4 page per truck with trips that
    day; the overview prints without its charts on few pages. Screenshots go to tests/artifacts."""
    from playwright.sync_api import sync_playwright  # noqa: PLC0415

    base, api = server["base"], server["api"]
    today = schedule.today(load_settings(environ=server["env"]))
    window = {"from": (today + dt.timedelta(days=1)).isoformat(), "to": (today + dt.timedelta(days=28)).isoformat()}
    days = [
        {t["date"] for t in api.get(f"{base}/api/v1/trucks/{truck}/trips", params=window, timeout=30).json()["trips"]}
        for truck in (TRUCK, OTHER_TRUCK)
    ]
    assert days[0] & days[1], "both demo trucks have a trip on some day of the next four weeks"
    day = min(days[0] & days[1])
    ARTIFACTS.mkdir(parents=True, exist_ok=True)

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            page = _signed_in(browser, base, server["token"])

            # The overview: each site's latest reading; the 0 L tank says so plainly.
            row = page.locator("table.readings tbody tr").filter(has_text=EMPTY_SITE)
            reading = row.locator("td.reading").inner_text()
            assert reading.startswith("0\u00a0L at ") and "h ago" in reading and "empty when read" in reading
            assert page.locator("table.readings tbody tr").count() == 16
            overview_pdf = _pdf_pages(page.pdf(format="A4", print_background=True))
            # The charts and route maps stay on screen: at most a page per demo truck (four) on paper.
            assert len(overview_pdf) <= 4, len(overview_pdf)
            assert "Latest readings" in " ".join(overview_pdf) and "planning aid" in overview_pdf[0]

            # Lowest first: the empty tank at the top, the unread ones last, the next delivery beside each.
            page.click("nav.pages a:text-is('Lowest first')")
            page.wait_for_load_state()
            assert page.url.endswith("/status/lowest")
            rows = page.locator("table.lowest tbody tr")
            assert rows.count() == 16
            first = rows.nth(0).inner_text()
            assert EMPTY_SITE in first or SITE in first  # the two tanks read at (nearly) nothing
            assert "empty" in first and "to deliver" in first
            assert "no reading on record" in rows.nth(15).inner_text()
            # Every column fits a laptop's width: the table does not scroll sideways.
            assert page.locator(".table-wrap").evaluate("e => e.scrollWidth <= e.clientWidth + 1")
            page.screenshot(path=str(ARTIFACTS / "status-lowest.png"), full_page=True)
            _non_blank(ARTIFACTS / "status-lowest.png")

            # The load sheets of a day both trucks drive: one A4 page each when printed.
            page.goto(f"{base}/status/load-sheet?date={day}")
            sheets = page.locator("section.sheet")
            assert sheets.count() == 2
            for index, truck in enumerate((TRUCK, OTHER_TRUCK)):
                text = sheets.nth(index).inner_text()
                assert f"Load sheet · {truck}" in text and day in text
                assert "Stops in driving order from depot" in text and "Total load" in text and "planning aid" in text
            pdf = page.pdf(format="A4", print_background=True)
            (ARTIFACTS / "status-load-sheets.pdf").write_bytes(pdf)
            printed = _pdf_pages(pdf)
            assert len(printed) == 2, [p[:80] for p in printed]
            for text, truck in zip(printed, (TRUCK, OTHER_TRUCK), strict=True):
                assert f"Load sheet · {truck}" in text and "Total load" in text and "planning aid" in text
            # One sheet as it prints: A4 at 96 dpi is 794 px wide.
            page.emulate_media(media="print")
            page.set_viewport_size({"width": 794, "height": 1123})
            sheets.nth(0).screenshot(path=str(ARTIFACTS / "status-load-sheet.png"))
            _non_blank(ARTIFACTS / "status-load-sheet.png")
            page.emulate_media(media="screen")
            page.set_viewport_size({"width": 1366, "height": 900})
            page.screenshot(path=str(ARTIFACTS / "status-load-sheets-screen.png"), full_page=True)

            page.goto(f"{base}/status")
            page.screenshot(path=str(ARTIFACTS / "status-overview-readings.png"), full_page=True)
            _non_blank(ARTIFACTS / "status-overview-readings.png")
        finally:
            browser.close()


def test_network_plans_show_progress_and_outcome_in_chromium(server):
    """Issue 16: a network plan posted through the API and computed by `ullage worker --once` shows its
    cost per day; a running one (written as the worker writes it) shows an accessible progress bar."""
    from playwright.sync_api import sync_playwright  # noqa: PLC0415
    from sqlalchemy.orm import Session  # noqa: PLC0415

    from service import network_inputs  # noqa: PLC0415
    from service.persistence import network_jobs as jobs  # noqa: PLC0415
    from service.persistence.db import make_engine  # noqa: PLC0415

    base, api = server["base"], server["api"]
    posted = api.post(f"{base}/api/v1/network-plans", json={}, timeout=30)
    assert posted.status_code == 202, posted.text
    _cli(server["env"], "worker", "--once")  # this gunicorn runs no worker thread (no config file)
    done = api.get(f"{base}{posted.headers['Location']}", timeout=30).json()
    assert done["status"] == "done", done
    # A running job as a worker writes it (claimed in the transaction that adds it; its heartbeat fresh).
    engine = make_engine(server["env"]["DATABASE_URL"])
    try:
        with Session(engine) as db:
            inputs = dict(network_inputs.snapshot(db), time_budget_seconds=60.0)
            job = jobs.add_job(db, created_by="browser-test", start_date=dt.date(2026, 1, 5), inputs=inputs)
            assert jobs.claim_next(db, "browser-test-worker") == job.id
            assert jobs.write_progress(db, job.id, "browser-test-worker", 0.42)
            db.commit()
            running = job.id
    finally:
        engine.dispose()

    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            page = _signed_in(browser, base, server["token"])
            section = page.locator("section.network-plans")
            assert section.is_visible()
            # The progress bar by its role and label, as assistive technology finds it.
            bar = page.get_by_role("progressbar", name=f"Progress of network plan {running}")
            assert bar.is_visible() and bar.get_attribute("value") == "0.4200"
            assert bar.bounding_box()["width"] > 50  # type: ignore[index]
            row = section.locator("tr.job").filter(has=page.locator("th", has_text=f"#{running}"))
            assert "42\u00a0%" in row.inner_text() and "Running" in row.inner_text()
            finished = section.locator("tr.job").filter(has=page.locator("th", has_text=f"#{done['id']}"))
            text = finished.inner_text()
            cost = f"{done['result']['cost_per_day']:,.2f}".replace(",", "\u00a0")
            assert "Done" in text and f"cost {cost}" in text and "not activated" in text, text
            assert finished.locator("progress").count() == 0
            section.screenshot(path=str(ARTIFACTS / "status-network-plans.png"))
        finally:
            browser.close()

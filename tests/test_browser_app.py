"""Real-browser test: the launcher starts the server, headless Debian Chromium opens every page.

Marked ``e2e``. Screenshots go to test-output/screenshots/. When /usr/bin/chromium (or
$CHROMIUM_PATH) is missing the test fails if $CI is set and is skipped otherwise. Playwright's
own browser download is never used.
"""
from __future__ import annotations

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from dataclasses import dataclass
from pathlib import Path

import pytest

pytestmark = pytest.mark.e2e

ROOT = Path(__file__).resolve().parent.parent
SHOTS = ROOT / "test-output" / "screenshots"
CHROMIUM = os.environ.get("CHROMIUM_PATH", "/usr/bin/chromium")
CHROMIUM_ARGS = ["--no-sandbox", "--disable-dev-shm-usage", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--no-first-run", "--enable-unsafe-swiftshader"]
CAMPAIGN = "th-screen-2026"
#: url path -> texts that must be on the rendered page
PAGES = {
    "": ["Campaigns", "Best candidates so far", "Temperatures"],
    "import_data": ["Import a campaign", "Import history"],
    "plate_map": ["Plate map", "Method"],
    "rates": ["Rates", "Replicate time courses"],
    "temperature": ["Temperature series", "Activation parameters", "Activation-energy lowering"],
    "orders": ["Reaction orders", "order in substrate"],
    "ranking": ["Ranking", "Pareto view"],
    "quality": ["Plate quality", "Benchmark control chart", "Edge map"],
    "shortlist": ["Shortlist", "scale-up", "Record the decision"],
    "history": ["Catalyst history", "Side by side", "Relative to the benchmark"],
}


def _need_chromium():
    if Path(CHROMIUM).is_file():
        return
    if os.environ.get("CI"):
        pytest.fail(f"{CHROMIUM} is missing; the browser test must run in CI")
    pytest.skip(f"{CHROMIUM} is missing (set CI to make this a failure)")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _healthy(port: int) -> bool:
    try:
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as r:
            return r.read().decode().strip() == "ok"
    except OSError:
        return False


@dataclass(frozen=True)
class Server:
    url: str
    store: Path


@pytest.fixture(scope="module")
def server(demo_store, tmp_path_factory):
    _need_chromium()
    store = tmp_path_factory.mktemp("browser-store") / "store.duckdb"
    shutil.copy2(demo_store, store)  # a private copy: the server process holds its own file
    from rounds import add_second_round

    add_second_round(store, store.parent)  # a decision on th-screen-2026 and its next round, run and imported
    port = _free_port()
    code = "import sys; from screenlab.cli import main; sys.exit(main(sys.argv[1:]))"
    log = tmp_path_factory.mktemp("browser-log") / "server.log"
    with open(log, "w") as out:
        proc = subprocess.Popen([sys.executable, "-c", code, "app", "--store", str(store), "--port", str(port)],
                                stdout=out, stderr=subprocess.STDOUT, cwd=tmp_path_factory.getbasetemp())
    try:
        deadline = time.monotonic() + 60
        while not _healthy(port):
            if proc.poll() is not None or time.monotonic() > deadline:
                pytest.fail(f"the app server did not start (exit {proc.poll()}):\n{log.read_text()}")
            time.sleep(0.3)
        yield Server(url=f"http://127.0.0.1:{port}", store=store)
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(timeout=10)


def wait_for_app_run(page, timeout_ms: int = 90_000) -> None:
    """Streamlit has connected, finished running the script and drawn no placeholder skeletons."""
    from playwright.sync_api import expect

    page.wait_for_selector("[data-testid='stApp'][data-test-connection-state='CONNECTED']", timeout=timeout_ms)
    page.wait_for_timeout(200)  # some widgets debounce before the run starts
    page.wait_for_selector("[data-testid='stApp'][data-test-script-state='notRunning']", timeout=timeout_ms)
    expect(page.get_by_test_id("stSkeleton")).to_have_count(0, timeout=timeout_ms)


def test_every_page_renders_in_chromium(server):
    from playwright.sync_api import expect, sync_playwright

    SHOTS.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            for path, texts in PAGES.items():
                page.goto(f"{server.url}/{path}?campaign={CAMPAIGN}", wait_until="domcontentloaded")
                wait_for_app_run(page)
                main = page.get_by_test_id("stMain")
                for text in texts:
                    expect(main.get_by_text(text, exact=False).filter(visible=True).first).to_be_visible(timeout=60_000)
                expect(page.get_by_test_id("stException")).to_have_count(0)
                page.screenshot(path=str(SHOTS / f"{path or 'campaigns'}.png"), full_page=True)
            assert not errors, errors
        finally:
            browser.close()


def _browser(p):
    return p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)


def test_ranking_pareto_view_in_chromium(server):
    from playwright.sync_api import expect, sync_playwright

    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            page.goto(f"{server.url}/ranking?campaign={CAMPAIGN}", wait_until="domcontentloaded")
            wait_for_app_run(page)
            page.get_by_test_id("stMain").get_by_text("Pareto view", exact=True).click()
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            expect(main.get_by_text("Metrics (two or three)").first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stPlotlyChart").first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stException")).to_have_count(0)
            page.screenshot(path=str(SHOTS / "ranking-pareto.png"), full_page=True)
        finally:
            browser.close()


def test_upload_check_and_commit_in_chromium(server, tmp_path):
    """A user uploads a campaign's files, reads the validation report, commits, and the store has it;
    a broken file set is refused with its row-level problems and writes nothing."""
    from playwright.sync_api import expect, sync_playwright

    from screenlab.store import Store
    from screenlab.synthetic import SyntheticSpec, write_campaign_folder

    name = "upload-check-2026"
    folder = write_campaign_folder(tmp_path / "upload", SyntheticSpec(n_plates=2, seed=5, name=name))
    files = sorted(str(f) for f in Path(folder).iterdir() if f.is_file())
    bad = tmp_path / "bad"
    bad.mkdir()
    for f in files:
        shutil.copy2(f, bad / Path(f).name)
    lay = (bad / "layout.csv").read_text().splitlines()
    first = lay[1].split(",")
    first[1] = "Z99"                                          # a well that no plate format has
    (bad / "layout.csv").write_text("\n".join([lay[0], ",".join(first), *lay[2:]]) + "\n")
    before = Store(server.store, read_only=True).campaign_names()
    assert name not in before
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            page.goto(f"{server.url}/import_data", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            upload = page.locator("[data-testid='stFileUploader'] input[type='file']").first
            # broken set first: the report lists the problem, nothing is written
            upload.set_input_files(sorted(str(f) for f in bad.iterdir()))
            wait_for_app_run(page)
            expect(main.get_by_text("nothing was written", exact=False).first).to_be_visible(timeout=60_000)
            expect(main.get_by_text("Import into the store")).to_have_count(0)
            assert Store(server.store, read_only=True).campaign_names() == before
            page.screenshot(path=str(SHOTS / "import-problems.png"), full_page=True)
            # a fresh visit (empty uploader): upload the good files and commit
            page.goto(f"{server.url}/import_data", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            upload = page.locator("[data-testid='stFileUploader'] input[type='file']").first
            upload.set_input_files(files)
            wait_for_app_run(page)
            expect(main.get_by_text("No problems found", exact=False).first).to_be_visible(timeout=60_000)
            expect(main.get_by_text("What the import would do", exact=False).first).to_be_visible()
            main.get_by_role("button", name="Import into the store").click()
            wait_for_app_run(page)
            expect(main.get_by_text("Import complete", exact=False).first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stException")).to_have_count(0)
            page.screenshot(path=str(SHOTS / "import-committed.png"), full_page=True)
        finally:
            browser.close()
    assert name in Store(server.store, read_only=True).campaign_names()
    stored = Store(server.store, read_only=True).load_campaign(name)
    assert len(stored.readings) == SyntheticSpec(n_plates=2, seed=5, name=name).n_readings


def test_two_rounds_in_chromium(server, tmp_path):
    """A team lead records a decision on the Shortlist page, downloads the report and opens it
    offline; the next round's page links back to the round before; the history page compares a
    renamed catalyst across both rounds."""
    from playwright.sync_api import expect, sync_playwright

    from rounds import ROUND1, ROUND2
    from screenlab.store import Store
    from screenlab.store.decisions import decisions

    SHOTS.mkdir(parents=True, exist_ok=True)
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 1000})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(f"{server.url}/shortlist?campaign={ROUND1}", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            main.get_by_label("Note (kept with the shortlist)").fill("Browser check: top three, confirm RU-02.")
            main.get_by_label("Note (kept with the shortlist)").press("Control+Enter")
            wait_for_app_run(page)
            main.get_by_role("button", name="Record this decision").click()
            wait_for_app_run(page)
            expect(main.get_by_text("Recorded as decision 2", exact=False).first).to_be_visible(timeout=60_000)
            page.screenshot(path=str(SHOTS / "shortlist-recorded.png"), full_page=True)
            with page.expect_download(timeout=60_000) as dl:
                main.get_by_role("button", name="Report (.html)").click()
            report = tmp_path / "report.html"
            dl.value.save_as(str(report))
            # the report opens with nothing fetched, shows the decision and prints to PDF
            rpage = browser.new_page(viewport={"width": 1100, "height": 900})
            fetched: list[str] = []
            rpage.on("request", lambda r: fetched.append(r.url))
            rpage.goto(report.as_uri(), wait_until="load")
            expect(rpage.get_by_text("Decision 2: RU-01, RU-02, RU-04").first).to_be_visible()
            expect(rpage.get_by_text("Browser check: top three, confirm RU-02.").first).to_be_visible()
            assert rpage.locator("svg").count() >= 2
            assert [u for u in fetched if not u.startswith("file:")] == []
            rpage.screenshot(path=str(SHOTS / "report.png"), full_page=True)
            rpage.pdf(path=str(SHOTS.parent / "report.pdf"), format="A4")
            assert (SHOTS.parent / "report.pdf").stat().st_size > 20_000
            # the next round links back to the round before and says what was decided there
            page.goto(f"{server.url}/?campaign={ROUND2}", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            expect(main.get_by_text("This round follows", exact=False).first).to_be_visible(timeout=60_000)
            expect(main.get_by_text("chose RU-01, RU-02, RU-04", exact=False).first).to_be_visible()
            page.screenshot(path=str(SHOTS / "campaigns-round2.png"), full_page=True)
            main.get_by_role("button", name=f"Open {ROUND1} (round before)").click()
            wait_for_app_run(page)
            expect(main.get_by_text("Rounds after this one", exact=False).first).to_be_visible(timeout=60_000)
            # the history of a renamed catalyst, reached from a link
            page.goto(f"{server.url}/history?catalyst=RU-04", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            expect(main.get_by_text(f"{ROUND2} (RU-04-B2)", exact=False).first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stPlotlyChart").first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stException")).to_have_count(0)
            page.screenshot(path=str(SHOTS / "history-RU-04.png"), full_page=True)
            assert not errors, errors
        finally:
            browser.close()
    notes = decisions(Store(server.store, read_only=True))["note"].tolist()
    assert notes[-1] == "Browser check: top three, confirm RU-02."


def test_add_readings_to_a_planned_campaign_in_chromium(server, tmp_path):
    """A planned round is in the store; the chemist drops the plate-reader grids on the Import page,
    reads the plate map of what arrived (and a refusal of a grid with a row missing), commits, and
    the store holds the readings the long form would have given."""
    import warnings

    from playwright.sync_api import expect, sync_playwright
    from grid_forms import to_grid_folder, to_planned

    from screenlab.ingest import read_campaign
    from screenlab.store import Store
    from screenlab.synthetic import SyntheticSpec, write_campaign_folder

    name = "round-2-planned"
    src = write_campaign_folder(tmp_path / "src", SyntheticSpec(n_plates=2, seed=8, name=name))
    planned = to_planned(src, tmp_path / "planned")
    grids = sorted((to_grid_folder(src, tmp_path / "grids") / "readings").iterdir())
    broken = tmp_path / "broken"
    broken.mkdir()
    lines = grids[0].read_text().splitlines()
    d_row = next(i for i, ln in enumerate(lines) if ln.startswith("D,"))
    (broken / grids[0].name).write_text("\n".join(lines[:d_row] + lines[d_row + 1:]) + "\n")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        Store(server.store).import_campaign(read_campaign(planned))
        expected = read_campaign(src).data.readings
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1440, "height": 2400})
            errors: list[str] = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(f"{server.url}/import_data", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            main.get_by_text("Readings for a planned campaign", exact=True).click()
            wait_for_app_run(page)
            page.screenshot(path=str(SHOTS / "add-readings-start.png"), full_page=True)
            expect(main.get_by_text("Planned campaign", exact=True).first).to_be_visible(timeout=60_000)
            upload = page.locator("[data-testid='stFileUploader'] input[type='file']").first
            # a grid with row D missing: refused, the problem named, no commit button
            upload.set_input_files([str(broken / grids[0].name)])
            wait_for_app_run(page)
            expect(main.get_by_text("nothing was written", exact=False).first).to_be_visible(timeout=60_000)
            expect(main.get_by_role("button", name="Add the readings to the store")).to_have_count(0)
            page.screenshot(path=str(SHOTS / "add-readings-refused.png"), full_page=True)
            # the good grids: the preview, then the commit
            page.goto(f"{server.url}/import_data", wait_until="domcontentloaded")
            wait_for_app_run(page)
            main = page.get_by_test_id("stMain")
            main.get_by_text("Readings for a planned campaign", exact=True).click()
            wait_for_app_run(page)
            upload = page.locator("[data-testid='stFileUploader'] input[type='file']").first
            upload.set_input_files([str(g) for g in grids])
            wait_for_app_run(page)
            expect(main.get_by_text("No problems found", exact=False).first).to_be_visible(timeout=60_000)
            expect(main.get_by_text("what arrived", exact=False).first).to_be_visible()
            expect(page.get_by_test_id("stPlotlyChart").first).to_be_visible(timeout=60_000)
            page.screenshot(path=str(SHOTS / "add-readings-preview.png"), full_page=True)
            assert len(Store(server.store, read_only=True).load_campaign(name).readings) == 0
            main.get_by_role("button", name="Add the readings to the store").click()
            wait_for_app_run(page)
            expect(main.get_by_text("Readings added", exact=False).first).to_be_visible(timeout=60_000)
            expect(page.get_by_test_id("stException")).to_have_count(0)
            page.screenshot(path=str(SHOTS / "add-readings-committed.png"), full_page=True)
            assert not errors, errors
        finally:
            browser.close()
    store = Store(server.store, read_only=True)
    import pandas as pd

    pd.testing.assert_frame_equal(store.load_campaign(name).readings, expected)
    hist = store.imports(name)
    assert list(hist["status"]) == ["imported", "readings_added"]

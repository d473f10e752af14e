"""The web page in headless Chromium (Debian's package, driven by playwright): upload two files, see the verdict.

The screenshot goes to artifacts/service/service_page.png (a test artefact) and, reduced to a palette PNG,
to docs/img/service_page.png for the README when SHOTCHECK_UPDATE_DOCS=1 is set.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import httpx
import pytest
import svc_records
from conftest import TOKEN
from svc_server import Server

REPO = Path(__file__).resolve().parents[2]
CHROMIUM = "/usr/bin/chromium"
ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync"]

pytestmark = [pytest.mark.slow,
              pytest.mark.skipif(shutil.which(CHROMIUM) is None, reason="Debian package chromium not installed")]


def _small_png(src: Path, dest: Path, width: int = 760, max_height: int = 1500) -> None:
    """The top of the page (form, verdict, wave-shape table, first figure), scaled and palette-reduced."""
    from PIL import Image

    im = Image.open(src).convert("RGB")
    im = im.crop((0, 0, im.width, min(im.height, max_height)))
    if im.width > width:
        im = im.resize((width, round(im.height * width / im.width)), Image.LANCZOS)
    im.quantize(colors=48, method=Image.Quantize.MEDIANCUT).save(dest, optimize=True)


def _simulated_pair(folder: Path) -> tuple[list[Path], list[Path], str]:
    """A simulated reduced/full pair of the bundled winding families (CSV reference, COMTRADE test)."""
    from synthetic.dataset import generate, load_dataset

    generate(2, folder / "set", seed=5, workers=1, progress=False)
    pairs = list(load_dataset(folder / "set"))
    ref, test, label = next((p for p in pairs if p[2]["event"] != "none"), pairs[0])
    r = svc_records.write_record(ref, folder / "KR-2291-07_1U_01_reduced.csv")
    t = svc_records.write_record(test, folder / "KR-2291-07_1U_02_full.cfg", data_format="BINARY32")
    return r, t, str(label["event"])


def test_upload_two_files_and_see_the_verdict(tmp_path, model_path, record_files):
    playwright = pytest.importorskip("playwright.sync_api")
    sim_ref, sim_test, sim_event = _simulated_pair(tmp_path)
    srv = Server(tmp_path / "data", model_path, TOKEN, tmp_path / "service.log").start()
    try:
        with httpx.Client(base_url=srv.url, headers={"Authorization": f"Bearer {TOKEN}"}, timeout=60) as c:
            sid = c.post("/v1/sequences", json={"unit_id": "TX-0000-SVC", "terminal": "2V"}).json()["id"]
            for key, kind, level in (("reduced_csv", "reduced", "75"), ("full_cff", "full", "100")):
                r = c.post(f"/v1/sequences/{sid}/shots", files=svc_records.upload("record", record_files[key]),
                           data={"kind": kind, "level_percent": level})
                assert r.status_code == 201, r.text
        with playwright.sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, args=ARGS)
            try:
                page = browser.new_page(viewport={"width": 1100, "height": 900})
                page.goto(srv.url + "/")
                assert "Safety caution" in page.inner_text("#caution")
                page.fill("#token", TOKEN)
                page.set_input_files("#reference", [str(p) for p in sim_ref])
                page.set_input_files("#test", [str(p) for p in sim_test])  # .cfg + .dat + .inf
                page.click("#compare-button")
                page.wait_for_selector("#verdict-line", timeout=60_000)
                line = page.inner_text("#verdict-line")
                assert line.startswith(("Fault indicated", "No fault indicated")) and "(advisory)" in line
                decision = page.inner_text("#decision-line")  # P(none) against the threshold it was decided at
                assert decision.startswith("Decision: probability of no fault") and "a fault is indicated below it" in decision
                rows = page.locator("#waveshape tbody tr")
                assert rows.count() == 9
                assert "lightning_" in rows.nth(0).inner_text()
                print(f"web page: simulated {sim_event} pair -> {line}")
                page.wait_for_function("document.querySelectorAll('#figures img').length > 0 && "
                                       "[...document.querySelectorAll('#figures img')].every(i => i.complete)",
                                       timeout=90_000)
                assert page.evaluate("[...document.querySelectorAll('#figures img')].every(i => i.naturalWidth > 0)")
                out = REPO / "artifacts" / "service"
                out.mkdir(parents=True, exist_ok=True)
                shot = out / "service_page.png"
                page.screenshot(path=str(shot), full_page=True)
                # the sequence view
                page.fill("#sequence-id", sid)
                page.click("#sequence-form button")
                page.wait_for_selector("#shots tbody tr", timeout=30_000)
                cells = page.locator("#shots tbody tr").nth(1).inner_text()
                assert "test" in cells and "full" in cells
                assert "terminal 2V" in page.inner_text("#sequence-summary")
                page.locator("#shots tbody tr").nth(1).locator("button.show-shot").click()  # that shot's verdict
                page.wait_for_function("document.getElementById('verdict-line').textContent.includes('TX_05') || "
                                       "document.getElementById('comparison-line').textContent.includes('TX_05')",
                                       timeout=30_000)
                # the API page, with every request from outside the service refused (an offline lab)
                outside: list[str] = []

                def only_local(route):
                    if route.request.url.startswith(srv.url):
                        route.continue_()
                    else:
                        outside.append(route.request.url)
                        route.abort()

                page.route("**/*", only_local)
                page.goto(srv.url + "/docs")
                page.wait_for_selector("#operations h2", timeout=30_000)
                headings = page.locator("#operations h2").all_inner_texts()
                assert "POST /v1/comparisons" in headings and "GET /health" in headings, headings
                assert "operations" in page.inner_text("#toc")
                assert outside == []
            finally:
                browser.close()
        assert shot.stat().st_size > 10_000
        if os.environ.get("SHOTCHECK_UPDATE_DOCS") == "1":  # refresh the README's picture on request only
            (REPO / "docs" / "img").mkdir(parents=True, exist_ok=True)
            _small_png(shot, REPO / "docs" / "img" / "service_page.png")
    finally:
        srv.stop()

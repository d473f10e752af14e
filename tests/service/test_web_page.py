"""The web page in headless Chromium (Debian's package, driven by playwright): upload two files, see the verdict.

The screenshot goes to artifacts/service/service_page.png (a test artefact) and, reduced to a palette PNG,
to docs/img/service_page.png for the README.
"""

from __future__ import annotations

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


def test_upload_two_files_and_see_the_verdict(tmp_path, model_path, record_files):
    playwright = pytest.importorskip("playwright.sync_api")
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
                page.set_input_files("#reference", [str(p) for p in record_files["reduced_csv"]])
                page.set_input_files("#test", [str(p) for p in record_files["full_cfg"]])  # .cfg + .dat + .inf
                page.click("#compare-button")
                page.wait_for_selector("#verdict-line", timeout=60_000)
                line = page.inner_text("#verdict-line")
                assert line.startswith(("Fault indicated", "No fault indicated")) and "(advisory)" in line
                rows = page.locator("#waveshape tbody tr")
                assert rows.count() == 9
                assert "lightning_full" in rows.nth(0).inner_text()
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
            finally:
                browser.close()
        (REPO / "docs" / "img").mkdir(parents=True, exist_ok=True)
        _small_png(shot, REPO / "docs" / "img" / "service_page.png")
        assert shot.stat().st_size > 10_000
    finally:
        srv.stop()

"""The task pane page in headless Chromium (Debian's package, driven by Playwright) against a running server:
it loads, lists models, trains on a pasted table, shows progress and the finished metrics. A screenshot
is taken and checked for the loss curve's colour."""

from __future__ import annotations

import shutil

import numpy as np
import pytest
import sheetnet_demo
from local_server import serving

from sheetnet import server

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
playwright = pytest.importorskip("playwright.sync_api", reason="Playwright is not installed (pip install playwright)")
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="Chromium is not installed (apt-get install chromium)")

TOKEN = "pane-token-0123456789abcdef"
FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run", "--disable-background-networking", "--disable-component-update", "--disable-sync"]
TRAINING_BLUE = np.array([21, 101, 192])  # the pane's training-loss line, #1565c0


@pytest.fixture(scope="module")
def base_url():
    with serving(server.create_app(TOKEN)) as address:
        yield address


def test_the_pane_trains_a_model_and_shows_its_metrics(base_url, tmp_path):
    from matplotlib.image import imread

    lots = sheetnet_demo.coffee_lot_grades(rows=200, seed=6).drop(columns="lot")
    csv = "\n".join([",".join(lots.columns)] + [",".join(str(v) for v in row) for row in lots.itertuples(index=False)])
    with playwright.sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=CHROMIUM, args=FLAGS)
        page = browser.new_page(viewport={"width": 900, "height": 1300})
        page.route("https://**/*", lambda route: route.abort())  # no outside network: Office's script fails fast
        page.goto(f"{base_url}/addin/taskpane.html#token={TOKEN}")
        page.wait_for_function("document.getElementById('connection').textContent === 'connected'", timeout=20000)
        assert page.inner_text("#models") == "none yet"
        assert "Not inside Excel" in page.inner_text("#mode-note")
        page.fill("#table-text", csv)
        page.fill("#target", "grade")
        page.fill("#model-name", "lots")
        page.fill("#hidden", "5")
        page.fill("#settings", "epochs=300")
        page.click("#train")
        page.wait_for_selector("#metrics:not([hidden])", timeout=60000)
        metrics = page.inner_text("#metrics")
        assert "accuracy" in metrics and "stopped by" in metrics
        assert "lots" in page.inner_text("#models") and "grade" in page.inner_text("#models")
        assert page.inner_text("#message") == "model lots trained"
        assert page.locator("#curve polyline").count() == 2  # training and validation loss
        assert float(page.get_attribute("#progress-bar", "value")) == 100
        shot = tmp_path / "pane.png"
        page.screenshot(path=str(shot), full_page=True)
        browser.close()
    image = (imread(shot)[..., :3] * 255).round()
    assert image.shape[0] > 600 and image.shape[1] >= 900
    blue = np.all(np.abs(image - TRAINING_BLUE) < 12, axis=-1)
    assert blue.sum() > 150  # the training-loss line (and the buttons) in the pane's blue are on screen

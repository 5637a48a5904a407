"""calculator.html in real headless Chromium (selenium with chromidriver, Debian's chromium and
chromium-driver): typing updates both surrogates' predictions and each term's contribution, an
input outside the training range raises a visible warning, the page asks the network for
nothing, and it prints. verify checks every reference row through the same page
(``engines.run_calculator``); this module drives it the way a person does, key by key.
"""
from __future__ import annotations

import base64
import json
import shutil

import numpy as np
import pytest

from pocketforest.scoring import engines
from pocketforest.scoring.bundle_io import read_manifest
from pocketforest.scoring.verify import read_reference

pytestmark = pytest.mark.skipif(shutil.which("chromedriver") is None or shutil.which("chromium") is None,
                                reason="Chromium and chromedriver are not installed")


@pytest.fixture(scope="module")
def page(bundles, tmp_path_factory):
    bundle = bundles["regression"]
    driver = engines.open_page(bundle / "calculator.html", tmp_path_factory.mktemp("chromium"))
    yield driver, bundle
    driver.quit()


def _spec(driver) -> dict:
    from selenium.webdriver.common.by import By
    return json.loads(driver.find_element(By.ID, "pf-spec").get_attribute("textContent"))


def test_typing_a_reference_row_shows_its_predictions(page):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    driver, bundle = page
    m = read_manifest(bundle)
    ref = read_reference(bundle, m)
    spec = _spec(driver)
    row = ref.iloc[3]
    for i, item in enumerate(spec["inputs"]):
        el = driver.find_element(By.ID, f"pf-in-{i}")
        v = row[item["name"]]
        if item["kind"] == "numeric":
            el.clear()
            if v == v:
                el.send_keys(repr(float(v)))
        else:
            Select(el).select_by_value(v if v else "")
    for model in ("equation", "tree"):
        shown = driver.find_element(By.ID, f"pf-{model}")
        # the page computes in double precision like equation.js / tree.js: verify's 1e-7 bound
        assert abs(float(shown.get_attribute("data-value")) - row[f"pred_{model}"]) <= 1e-7 * max(1, abs(row[f"pred_{model}"]))
        # the text is the same number to 6 significant digits (relative rounding 5e-6)
        value = float(shown.get_attribute("data-value"))
        assert abs(float(shown.text) - value) <= 5e-6 * abs(value)
    cells = driver.find_elements(By.CSS_SELECTOR, "#pf-terms td.num")
    parts = np.array([float(c.get_attribute("data-value")) for c in cells])
    assert len(parts) == len(m["equation"]["contribution_labels"])
    eta = float(driver.find_element(By.ID, "pf-eta-0").get_attribute("data-value"))
    # a sum of the displayed contributions in another order: double rounding only
    assert abs(parts.sum() - eta) <= 1e-12 * max(1.0, np.abs(parts).max())
    assert abs(eta - row["pred_equation"]) <= 1e-7 * max(1, abs(row["pred_equation"]))  # identity link


def test_outside_the_training_range_warns(page):
    from selenium.webdriver.common.by import By
    driver, _ = page
    spec = _spec(driver)
    i, item = next((i, it) for i, it in enumerate(spec["inputs"]) if it["kind"] == "numeric" and "equation" in it["used_by"])
    el = driver.find_element(By.ID, f"pf-in-{i}")
    el.clear()
    el.send_keys(repr(item["max"] + 10.0))
    warning = driver.find_element(By.ID, "pf-warning")
    assert warning.is_displayed() and item["name"] in warning.text and "outside the training range" in warning.text
    el.clear()
    el.send_keys(repr(item["min"]))
    assert not warning.is_displayed()


def test_no_network_and_it_prints(page):
    from selenium.webdriver.common.print_page_options import PrintOptions
    driver, bundle = page
    html = (bundle / "calculator.html").read_text(encoding="utf-8")
    assert "Content-Security-Policy" in html and "default-src 'none'" in html
    assert "http://" not in html and "https://" not in html
    assert driver.execute_script("return performance.getEntriesByType('resource').length") == 0
    pdf = base64.b64decode(driver.print_page(PrintOptions()))
    assert pdf.startswith(b"%PDF")

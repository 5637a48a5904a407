"""report.html: every section present, no web address anywhere, figures drawn from the fitted
objects (checked against constructed truth), and the page rendered by a real browser."""
from __future__ import annotations

import re

import numpy as np
import pytest

from conftest import chromium, screenshot, synthetic_table

SECTION_IDS = ["data", "scoreboard", "importance", "shapes", "interactions", "equation", "tree",
               "tree-size", "elsewhere", "cautions"]
WITH_FIGURE = ["scoreboard", "importance", "shapes", "tree", "tree-size"]


def _sections(page: str) -> dict[str, str]:
    parts = re.split(r"<section id='([^']+)'>", page)
    return {parts[i]: parts[i + 1] for i in range(1, len(parts), 2)}


def _assert_offline(page: str) -> None:
    """No address the browser could fetch: no scheme, no protocol-relative link, no script or import."""
    low = page.lower()
    assert "http://" not in low and "https://" not in low and "ftp://" not in low
    for attr in re.findall(r"""(?:src|href|action|data)\s*=\s*["']([^"']*)""", low):
        assert attr.startswith("#") or attr.startswith("data:"), attr
    assert "<script" not in low and "<link" not in low and "<iframe" not in low and "@import" not in low
    for target in re.findall(r"url\(([^)]*)\)", low):
        assert target.strip("'\" ").startswith("#"), target


@pytest.fixture(scope="module")
def with_terms():
    """A Distillation whose equation holds a quadratic, a hinge and two interactions (built by hand
    through the term model), plus a manifest carrying measured pairs."""
    from pocketforest.bundle import build_files
    from pocketforest.equation import fit_equation
    from pocketforest.intake import prepare
    from pocketforest.pipeline import Settings, distill
    from pocketforest.terms import Term, main_effects
    df = synthetic_table(n=500, seed=4)
    r = distill(prepare(df, "y", source="terms.csv"), Settings(trees=40, seed=2, quiet=True, bootstrap=100))
    conf = r.table.data.iloc[r.splits.confirmation].reset_index(drop=True)
    base = main_effects(r.table.features)
    terms = base + [Term("quadratic", ["x1"], {"centre": 0.05}),
                    Term("hinge", ["x2"], {"knot": 0.2, "direction": "above"}),
                    Term("interaction", ["x2", "x3"], {"centres": {"x2": 0.0, "x3": 0.0}, "power": 1}),
                    Term("interaction", ["x1", "colour"], {"centres": {}})]
    r.equation = fit_equation(terms, conf, conf["y"].to_numpy(dtype=float), task="regression", target="y",
                              fills=r.fills, kinds=r.kinds, classes=None, baseline=base)
    _, m = build_files(r, "2026-01-01T00:00:00+00:00")
    m["interactions"] = [{"variables": ["x2", "x3"], "h2": 0.41}, {"variables": ["x1", "colour"], "h2": 0.12},
                         {"variables": ["x1", "x2"], "h2": 0.02}]
    return r, m


@pytest.mark.parametrize("name", ["regression", "binary", "multiclass"])
def test_bundle_report_has_every_section_and_no_address(bundles, name):
    page = (bundles[name] / "report.html").read_text(encoding="utf-8")
    sections = _sections(page)
    assert list(sections) == SECTION_IDS
    for key in WITH_FIGURE:
        assert "<svg" in sections[key], key
    assert "<math" in sections["equation"]
    assert "could not be drawn" not in page
    assert "decision support only" in sections["cautions"]
    assert "confirm" in sections["cautions"].lower() and "training range" in sections["cautions"]
    _assert_offline(page)
    ids = re.findall(r"""\bid=["']([^"']+)""", page)
    assert len(ids) == len(set(ids)), "element ids repeat across figures"


def test_report_with_suggested_terms(with_terms):
    from pocketforest.report import render_report
    r, m = with_terms
    page = render_report(r, m)
    s = _sections(page)
    _assert_offline(page)
    assert "could not be drawn" not in page
    eq = s["equation"]
    assert "<msup>" in eq and "<mi>max</mi>" in eq  # the quadratic and the hinge, typeset
    assert eq.count("<mo>·</mo><mi mathvariant='normal'>x3</mi>") >= 1  # x2 · x3
    assert "F test" in eq and "degrees of freedom" in eq  # block test of the suggested terms
    assert "<svg" in s["interactions"] and "x2 × x3" in s["interactions"]
    assert "bend: squared distance from 0.05" in s["shapes"]
    assert "interaction with colour" in s["shapes"]


def test_equation_section_shows_the_manifest_note(with_terms):
    """The page reads ``equation.note``, the key the bundle writes, and escapes it once."""
    from pocketforest.report import render_report
    r, m = with_terms
    m2 = {**m, "equation": {**m["equation"], "note": "Estimated on rows <b>& kept</b> apart."}}
    eq = _sections(render_report(r, m2))["equation"]
    assert "Estimated on rows &lt;b&gt;&amp; kept&lt;/b&gt; apart." in eq


def test_equation_curve_is_its_own_partial_dependence(with_terms):
    """Constructed truth: with x2 entering as b·x2 + c·max(0, x2 − 0.2) + d·x2·x3, the equation's
    partial dependence on x2 has slope b + d·mean(x3) below the knot and b + c + d·mean(x3) above."""
    from pocketforest.expr import evaluate
    from pocketforest.report.shapes import shape_curves
    r, m = with_terms
    (curve,) = shape_curves(r, m, ["x2"])
    grid, eq = np.asarray(curve["grid"]), np.asarray(curve["equation"][0])
    labels = ["Intercept"] + [c.label for c in r.equation.columns]
    coef = dict(zip(labels, r.equation.coef))
    rng = np.random.default_rng(int(m["seed"]))
    disc = r.table.data.iloc[r.splits.discovery].reset_index(drop=True)
    sample = disc.iloc[np.sort(rng.choice(len(disc), min(150, len(disc)), replace=False))]
    x3 = evaluate(next(c for c in r.equation.columns if c.label == "x3").node, sample).mean()
    slopes = np.diff(eq) / np.diff(grid)
    mid = (grid[:-1] + grid[1:]) / 2
    below = coef["x2"] + coef["x2 * x3"] * x3
    above = below + coef["max(0, x2 - 0.2)"]
    # differencing row means whose other terms cancel: rounding ~2 * eps * |prediction| / step
    # (~1e-14 here); rtol 1e-8 / atol 1e-10 are far above it
    np.testing.assert_allclose(slopes[grid[1:] <= 0.2], below, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(slopes[grid[:-1] >= 0.2], above, rtol=1e-8, atol=1e-10)
    assert len(mid) == len(slopes)


def test_forest_curve_for_a_category_finds_the_planted_effect(with_terms):
    """Constructed truth (conftest.synthetic_table): colour 'red' adds 1.0 to the outcome."""
    from pocketforest.report.shapes import shape_curves
    r, m = with_terms
    (c,) = shape_curves(r, m, ["colour"])
    pd_ = dict(zip(c["grid"], c["forest"][0]))
    gap = pd_["red"] - (pd_["blue"] + pd_["green"]) / 2
    assert 0.5 < gap < 1.3, pd_  # forests shrink effects towards the mean; the sign and size must show


def test_stored_discovery_curve_is_used(with_terms):
    """The panel reads the fields discovery writes (kind, grid, pd, scale), nothing else."""
    from pocketforest.report.shapes import shape_curves
    r, m = with_terms
    grid = [-0.5, 0.0, 0.5]
    r.discovery.shapes = {"x1": {"kind": "numeric", "grid": grid, "pd": [1.0, 2.0, 3.0], "scale": "value"}}
    try:
        (c,) = shape_curves(r, m, ["x1"])
    finally:
        r.discovery.shapes = {}
    # both lines centred, so the stored curve's own level does not matter
    assert c["source"] == "discovery step" and c["forest"] == [[-1.0, 0.0, 1.0]] and c["grid"] == grid
    # centred: three values summing to zero within ~3 * eps * |value|
    assert len(c["equation"][0]) == 3 and abs(sum(c["equation"][0])) < 1e-9 and "centred" in c["scale"]


def test_stored_curve_on_another_scale_is_not_drawn_as_a_probability(with_terms):
    """A classification curve is stored as log-odds while the panel compares probabilities, so the
    report computes its own curve rather than draw log-odds beside a probability."""
    from pocketforest.report.shapes import shape_curves
    r, m = with_terms
    r.discovery.shapes = {"x1": {"kind": "numeric", "grid": [-0.5, 0.0, 0.5], "pd": [1.0, 2.0, 3.0],
                                 "scale": "log-odds"}}
    try:
        (c,) = shape_curves(r, m, ["x1"])
    finally:
        r.discovery.shapes = {}
    assert c["source"] == "computed for this report" and len(c["grid"]) > 3


@pytest.mark.skipif(chromium() is None, reason="no Chromium on PATH (CI installs the Debian package "
                    "`chromium` in .ci/run; install it to run this test)")
def test_report_renders_in_headless_chromium(bundles, tmp_path):
    """Open the page in a real browser, offline, and check the screenshot is not blank."""
    import matplotlib.image as mpimg
    page = bundles["regression"] / "report.html"
    shot = tmp_path / "page.png"
    res = screenshot(page, shot, (1200, 3000), tmp_path)
    assert shot.is_file(), res.stderr[-2000:]
    img = mpimg.imread(str(shot))[..., :3]
    assert img.shape[0] == 3000 and img.shape[1] == 1200
    background = img[5, 5]  # the page colour in the top-left margin
    ink = np.any(np.abs(img - background) > 0.08, axis=2)
    # text, tables and figures cover a good part of a 1200x3000 window of this page
    assert ink.mean() > 0.03, ink.mean()
    assert img.std() > 0.05
    # the figures are drawn: the forest green of the bars/lines appears
    green = np.all(np.abs(img - np.array([0x3f, 0x6a, 0x35]) / 255) < 0.06, axis=2)
    assert green.sum() > 500


def test_scoring_snippets_follow_the_bundle_files(with_terms):
    """Snippets appear for the exports the bundle holds and refer to its files by name."""
    from pocketforest.report import render_report
    r, m = with_terms
    full = {"forest.onnx", "tree.onnx", "equation.onnx", "equation.txt", "tree.txt", "reference.csv",
            "equation.sql", "equation.py", "equation.js", "tree.sql", "tree.py", "tree.js", "equation.tex",
            "equation.R", "tree.R", "equation.sps", "equation.xlsx", "calculator.html"}
    s = _sections(render_report(r, m, full))["elsewhere"]
    for needle in ("forest.onnx", ".read equation.sql", "or tree.sql", "spec_from_file_location(\"equation\"",
                   "require(\"./equation.js\")", "reference.csv", "pocketforest verify .",
                   "source(&quot;equation.R&quot;)", "pocketforest_tree$predict", "INSERT FILE='equation.sps'",
                   "equation.xlsx", "calculator.html", "--explain"):
        assert needle in s, needle
    bare = _sections(render_report(r, m, {"forest.onnx", "tree.onnx", "equation.onnx", "reference.csv"}))
    assert "equation.sql" not in bare["elsewhere"] and "require(" not in bare["elsewhere"]
    assert "equation.R" not in bare["elsewhere"] and "equation.sps" not in bare["elsewhere"]
    assert "no SQL, Python or JavaScript" in bare["elsewhere"] and "forest.onnx" in bare["elsewhere"]
    assert "equation.tex" not in bare["equation"]


def test_a_failing_section_is_reported_in_place(with_terms, capsys):
    """A section that cannot be drawn says so on the page and on stderr; the others still render."""
    from pocketforest.report import render_report
    r, m = with_terms
    broken = dict(m, interactions=[{"variables": ["x1", "no_such_column"], "h2": "not a number"}])
    s = _sections(render_report(r, broken))
    assert "could not be drawn" in s["interactions"] and "manifest.json" in s["interactions"]
    assert "<svg" in s["importance"] and "<svg" in s["tree"]
    assert "report section 'interactions' could not be drawn" in capsys.readouterr().err


@pytest.mark.parametrize("name", ["regression", "multiclass"])
def test_interaction_table_puts_figures_in_columns(bundles, name):
    """One row per measured pair with each figure the records carry (H², strength, ...) and kept
    in cells of their own; nothing is escaped twice, and no long text repeats per row."""
    import json

    from pocketforest.report.page import _PAIR_COLUMNS
    page = (bundles[name] / "report.html").read_text(encoding="utf-8")
    m = json.loads((bundles[name] / "manifest.json").read_text(encoding="utf-8"))
    sec = _sections(page)["interactions"]
    pairs = [i for i in m["interactions"] if len(i["variables"]) == 2]
    assert pairs, "the synthetic table has material pairs to measure"
    head = re.search(r"<thead>(.*?)</thead>", sec).group(1)
    for key, label in _PAIR_COLUMNS + [("kept", "kept")]:
        assert (f">{label}<" in head) == any(key in i for i in pairs), label
    assert ">H²<" in head and ">strength<" in head and ">kept<" in head
    assert sec.count("<tr>") == len(pairs) + 1
    assert "&amp;#" not in sec and "&amp;amp;" not in sec
    for text in {i["threshold_rule"] for i in pairs if "threshold_rule" in i}:
        assert sec.count(text.replace("'", "&#x27;")) == 1
    kept = sum(1 for i in pairs if i["kept"])
    assert len(re.findall(r"<td class=l>yes</td>", sec)) == kept


def test_screening_table_and_correlated_clusters_come_from_typed_records(with_terms):
    """The importance test per variable and the correlated clusters are drawn from the manifest's
    records (no note text is read): one row per variable, one per cluster."""
    from pocketforest.report import render_report
    r, m = with_terms
    mat = m["discovery"]["materiality"]
    clusters = [{"variables": ["x1", "x2", "x3"], "max_abs_spearman": 0.91},
                {"variables": ["a b", "c"], "max_abs_spearman": 0.95}]
    m2 = {**m, "discovery": {**m["discovery"], "materiality": {**mat, "correlated_clusters": clusters}}}
    sec = _sections(render_report(r, m2))["importance"]
    table = sec[sec.index("Is each variable's importance more than noise?"):]
    first = table[:table.index("</table>")]
    assert first.count("<tr>") == len(mat["variables"]) + 1
    assert "Strongly correlated columns" in sec and "<td class=l>a b, c</td>" in sec and ">0.95<" in sec
    plain = {**m, "discovery": {**m["discovery"], "materiality": {**mat, "correlated_clusters": []}}}
    assert "Strongly correlated columns" not in _sections(render_report(r, plain))["importance"]

"""tree.svg and tree.txt: the whole tree, every box and edge, colours that follow the
prediction, text as short as the tree, and the drawing rendered by a real browser."""
from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from conftest import chromium, screenshot
from pocketforest.export.tree_spec import TreeNode
from pocketforest.export.tree_svg import tree_svg
from pocketforest.palette import FOREST

NS = {"s": "http://www.w3.org/2000/svg"}


def _boxes(svg: str, kind: str) -> list[tuple[float, str, list[str]]]:
    """(centre x, fill, lines) of every box of ``kind`` ("leaf" or "split")."""
    root = ET.fromstring(svg)
    out = []
    for g in root.iterfind(f".//s:g[@class='{kind}']", NS):
        rect = g.find("s:rect", NS)
        x = float(rect.get("x")) + float(rect.get("width")) / 2
        out.append((x, rect.get("fill"), [t.text for t in g.iterfind("s:text", NS)]))
    return out


def _luminance(hex_colour: str) -> float:
    r, g, b = (int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


@pytest.mark.parametrize("name", ["regression", "binary", "multiclass"])
def test_every_node_is_drawn_with_its_condition_share_and_prediction(bundles, name):
    path = bundles[name]
    m = json.loads((path / "manifest.json").read_text())
    svg = (path / "tree.svg").read_text(encoding="utf-8")
    assert "tree.svg" in m["artifacts"] and "<script" not in svg.lower()
    leaves, splits = _boxes(svg, "leaf"), _boxes(svg, "split")
    assert len(leaves) == m["tree"]["leaves"] <= 12 and len(splits) == len(leaves) - 1
    root = ET.fromstring(svg)
    assert len(root.findall(".//s:g[@class='edge-yes']", NS)) == len(splits)
    assert len(root.findall(".//s:g[@class='edge-no']", NS)) == len(splits)
    for _, _, lines in splits:
        assert re.search(r" (≤|=) ", lines[0]) and "of rows · " in lines[1]
    shares = [float(lines[1].split("%")[0].lstrip("<")) for _, _, lines in leaves]
    assert sum(shares) == pytest.approx(100, abs=0.6 * len(leaves))   # each share is rounded to 0.1-1 %
    # tree.txt: three heading lines, two per split (if / else), one per leaf
    text = (path / "tree.txt").read_text()
    assert len(text.strip("\n").splitlines()) == 3 + 2 * len(splits) + len(leaves)


def test_colours_follow_the_predicted_value(bundles):
    svg = (bundles["regression"] / "tree.svg").read_text(encoding="utf-8")
    leaves = sorted(_boxes(svg, "leaf"), key=lambda b: float(b[2][0]))
    light = [_luminance(fill) for _, fill, _ in leaves]
    assert all(a >= b for a, b in zip(light, light[1:]))        # higher prediction, deeper green
    assert leaves[-1][1] == FOREST


def test_yes_is_always_the_left_branch():
    """Constructed: a category split sends rows equal to the level RIGHT in the tree (tree_spec),
    a numeric split sends x <= t LEFT; the drawing puts "yes" on the left either way."""
    nodes = [TreeNode(0, 100, [3.0], feature="colour", level="red", left=1, right=2),
             TreeNode(1, 70, [1.0], feature="x", threshold=0.5, fill=0.4, left=3, right=4),
             TreeNode(2, 30, [5.0]),
             TreeNode(3, 40, [0.5]), TreeNode(4, 30, [1.5])]
    svg = tree_svg(nodes, "regression", "y", None)
    x = {lines[0]: cx for cx, _, lines in _boxes(svg, "leaf")}
    assert x["5"] < x["0.5"] < x["1.5"]          # red (yes) | not red: x <= 0.5 (yes), x > 0.5
    split_lines = [lines for _, _, lines in _boxes(svg, "split")]
    assert ["colour = red", "100% of rows · 3"] in split_lines and ["x ≤ 0.5", "70% of rows · 1"] in split_lines
    assert "x = 0.4" in svg                       # the value a missing x takes, in the reading notes


@pytest.mark.skipif(chromium() is None, reason="no Chromium on PATH (CI installs the Debian package "
                    "`chromium` in .ci/run; install it to run this test)")
def test_tree_svg_renders_in_headless_chromium(bundles, tmp_path):
    import matplotlib.image as mpimg
    svg = bundles["regression"] / "tree.svg"
    root = ET.fromstring(svg.read_text(encoding="utf-8"))
    size = (int(root.get("width")), int(root.get("height")))
    shot = tmp_path / "tree.png"
    res = screenshot(svg, shot, size, tmp_path)
    assert shot.is_file(), res.stderr[-2000:]
    img = mpimg.imread(str(shot))[..., :3]
    assert img.shape[:2] == (size[1], size[0])
    ink = np.any(np.abs(img - img[3, 3]) > 0.08, axis=2)
    assert ink.mean() > 0.04, ink.mean()          # boxes, text and edges cover the page
    # the most productive leaf is filled forest green (PNG rounding: a few levels of 255)
    green = np.all(np.abs(img - np.array([0x3f, 0x6a, 0x35]) / 255) < 0.03, axis=2)
    assert green.sum() > 300

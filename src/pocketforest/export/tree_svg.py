"""tree.svg: the whole surrogate tree drawn for a slide or a paper.

Every box is drawn: a split box holds its condition, its share of the discovery rows and its
prediction; a leaf box holds its prediction and share. The branch taken when the condition holds
is always drawn on the left and marked "yes", the other "no". Colours say the prediction (a
parchment-to-green ramp of the predicted value, or the colour of the most likely class, deeper
as that class grows more likely), with a key at the bottom. Text stays text, so the figure can
be edited and searched, and the file is plain SVG with no script, font or link.

Boxes are sized from the text's width in DejaVu Sans, measured with matplotlib's font metrics
(the font matplotlib ships); a reader without that font gets a narrower font, so text only fits
more loosely.
"""
from __future__ import annotations

import textwrap
import warnings
from dataclasses import dataclass
from xml.sax.saxutils import escape, quoteattr

import numpy as np

from ..palette import CLASS_COLOURS, FRAME, GRID, INK, LOSS, PAPER, FOREST, VALUE_RAMP
from .tree_spec import TreeNode

FONT = "'DejaVu Sans', Verdana, Arial, sans-serif"
SIZE, SMALL = 12.0, 10.5          # font sizes (px) of the first line and the rest
PAD_X, PAD_Y, LINE = 9.0, 7.0, 15.0
GAP_X, GAP_Y, MARGIN = 14.0, 38.0, 16.0
MIN_BOX = 64.0


def _width(text: str, size: float, bold: bool = False) -> float:
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath
    font = FontProperties(family="DejaVu Sans", size=size, weight="bold" if bold else "normal")
    with warnings.catch_warnings():   # a glyph DejaVu lacks (CJK, emoji) measures as its placeholder box
        warnings.simplefilter("ignore")
        w, _, _ = TextToPath().get_text_width_height_descent(text, font, ismath=False)
    return float(w)


def number(v: float, digits: int = 4) -> str:
    """A short positional number: ``digits`` significant digits, no exponent for everyday sizes."""
    v = float(v)
    if v == 0 or not 1e-3 <= abs(v) < 1e7:
        return f"{v:.{digits}g}"
    return np.format_float_positional(v, precision=digits, unique=False, fractional=False, trim="-")


def threshold_text(t: float) -> str:
    """A split threshold (a float32 value) in six significant digits: enough to tell apart data
    recorded to five, and what a person writes on a slide; ``tree.txt`` carries seven."""
    return number(t, 6)


def share_text(share: float) -> str:
    if share >= 0.1:
        return f"{share:.0%}"
    return f"{share:.1%}" if share >= 0.001 else "<0.1%"


def _short(text: str, n: int = 28) -> str:
    return text if len(text) <= n else text[: n - 1] + "…"


def condition(node: TreeNode) -> str:
    """The condition whose "yes" branch is drawn on the left."""
    if node.level is not None:
        level = node.level if node.level else "(missing)"
        return f"{_short(node.feature)} = {_short(level, 20)}"
    return f"{_short(node.feature)} ≤ {threshold_text(node.threshold)}"


def yes_no(node: TreeNode) -> tuple[int, int]:
    """(child when the condition holds, child when it does not): a numeric split sends
    ``x <= t`` left; a category split sends rows equal to the level right (tree_spec)."""
    return (node.left, node.right) if node.level is None else (node.right, node.left)


def _mix(hex_colour: str, amount: float) -> tuple[float, float, float]:
    """The colour blended with white: amount 0 is white, 1 the colour itself."""
    rgb = np.array([int(hex_colour[i:i + 2], 16) for i in (1, 3, 5)], dtype=float) / 255.0
    return tuple(1.0 - amount * (1.0 - rgb))


def _ramp(x: float) -> tuple[float, float, float]:
    """Piecewise-linear colour along VALUE_RAMP for x in [0, 1]."""
    stops = [np.array(_mix(c, 1.0)) for c in VALUE_RAMP]
    x = min(1.0, max(0.0, float(x))) * (len(stops) - 1)
    i = min(int(x), len(stops) - 2)
    return tuple(stops[i] + (x - i) * (stops[i + 1] - stops[i]))


def _hex(rgb) -> str:
    return "#" + "".join(f"{int(round(255 * c)):02x}" for c in rgb)


def _dark(rgb) -> bool:
    r, g, b = rgb
    return 0.2126 * r + 0.7152 * g + 0.0722 * b < 0.45


@dataclass
class _Box:
    lines: list[str]
    fill: tuple[float, float, float]
    w: float
    h: float
    x: float = 0.0     # centre
    y: float = 0.0     # top


class _Palette:
    """Fill colour of a box from its prediction."""

    def __init__(self, nodes: list[TreeNode], task: str, classes: list[str] | None):
        self.task, self.classes = task, classes
        leaves = [n.value[0] for n in nodes if n.is_leaf] if task == "regression" else [0.0]
        self.lo, self.hi = float(min(leaves)), float(max(leaves))

    def scale(self, v: float) -> float:
        return (v - self.lo) / (self.hi - self.lo) if self.hi > self.lo else 0.5

    def fill(self, node: TreeNode):
        if self.task == "regression":
            return _ramp(self.scale(node.value[0]))
        k = int(np.argmax(node.value))
        return _mix(CLASS_COLOURS[k % len(CLASS_COLOURS)], 0.2 + 0.65 * float(node.value[k]))


def prediction_text(node: TreeNode, task: str, classes: list[str] | None) -> str:
    if task == "regression":
        return number(node.value[0])
    k = int(np.argmax(node.value))
    return f"{_short(str(classes[k]), 18)} {node.value[k]:.0%}"


def tree_svg(nodes: list[TreeNode], task: str, target: str, classes: list[str] | None, *,
             title: str | None = None, note: str | None = None) -> str:
    """The tree as a standalone SVG document. ``title``: the heading line (default names the
    target and the size); ``note``: an extra line under the key (such as the tree's fidelity)."""
    by_id = {n.id: n for n in nodes}
    root = by_id[0]
    total = max(root.samples, 1)
    palette = _Palette(nodes, task, classes)
    boxes: dict[int, _Box] = {}
    for n in nodes:
        share = share_text(n.samples / total)
        pred = prediction_text(n, task, classes)
        lines = [pred, f"{share} of rows"] if n.is_leaf else [condition(n), f"{share} of rows · {pred}"]
        w = max(_width(lines[0], SIZE, bold=True), *(_width(s, SMALL) for s in lines[1:])) + 2 * PAD_X
        boxes[n.id] = _Box(lines, palette.fill(n), max(MIN_BOX, w), 2 * PAD_Y + LINE * len(lines))
    box_h = max(b.h for b in boxes.values())
    for b in boxes.values():
        b.h = box_h

    span: dict[int, float] = {}

    def measure(i: int) -> float:
        n = by_id[i]
        if n.is_leaf:
            span[i] = boxes[i].w
        else:
            yes, no = yes_no(n)
            span[i] = max(boxes[i].w, measure(yes) + GAP_X + measure(no))
        return span[i]

    depth_of: dict[int, int] = {}

    def place(i: int, x0: float, depth: int) -> None:
        n, b = by_id[i], boxes[i]
        depth_of[i] = depth
        b.y = MARGIN + 34.0 + depth * (box_h + GAP_Y)
        if n.is_leaf:
            b.x = x0 + span[i] / 2
            return
        yes, no = yes_no(n)
        inner = span[yes] + GAP_X + span[no]
        start = x0 + (span[i] - inner) / 2
        place(yes, start, depth + 1)
        place(no, start + span[yes] + GAP_X, depth + 1)
        mid = (boxes[yes].x + boxes[no].x) / 2
        b.x = min(max(mid, x0 + b.w / 2), x0 + span[i] - b.w / 2)

    measure(0)
    place(0, MARGIN, 0)
    levels = max(depth_of.values()) + 1
    leaves = sum(n.is_leaf for n in nodes)
    heading = title or f"Surrogate tree for {target}: {leaves} leaves, depth {levels - 1}"
    key_lines = _key_lines(task, target, classes, palette)
    foot = _footnotes(nodes, note, max(90, int(span[0] / 6.2)))
    tree_bottom = MARGIN + 34.0 + levels * (box_h + GAP_Y) - GAP_Y
    key_y = tree_bottom + 24.0
    height = key_y + 22.0 + 16.0 * len(foot) + MARGIN
    width = max(span[0] + 2 * MARGIN, _width(heading, 14.0, bold=True) + 2 * MARGIN, key_lines[1] + 2 * MARGIN,
                *(_width(s, SMALL) + 2 * MARGIN for s in foot))

    out = [f"<svg xmlns=\"http://www.w3.org/2000/svg\" width=\"{width:.0f}\" height=\"{height:.0f}\" "
           f"viewBox=\"0 0 {width:.1f} {height:.1f}\" role=\"img\" aria-label={quoteattr(heading)} "
           f"font-family={quoteattr(FONT)}>",
           f"<title>{escape(heading)}</title>",
           f"<rect width=\"100%\" height=\"100%\" fill=\"{PAPER}\"/>",
           f"<text x=\"{MARGIN}\" y=\"{MARGIN + 14}\" font-size=\"14\" font-weight=\"bold\" fill=\"{INK}\">"
           f"{escape(heading)}</text>"]
    # edges first, boxes over them
    for n in nodes:
        if n.is_leaf:
            continue
        b = boxes[n.id]
        for child, word, colour in zip(yes_no(n), ("yes", "no"), (FOREST, LOSS)):
            c = boxes[child]
            x0, y0, x1, y1 = b.x, b.y + b.h, c.x, c.y
            ym = y0 + GAP_Y / 2
            out.append(f"<path d=\"M{x0:.1f},{y0:.1f} V{ym:.1f} H{x1:.1f} V{y1:.1f}\" fill=\"none\" "
                       f"stroke=\"{FRAME}\" stroke-width=\"1.2\"/>")
            lx = x0 + (x1 - x0) * 0.5
            out.append(f"<g class=\"edge-{word}\"><rect x=\"{lx - 14:.1f}\" y=\"{ym - 8:.1f}\" width=\"28\" height=\"16\" "
                       f"rx=\"8\" fill=\"{PAPER}\" stroke=\"{colour}\" stroke-width=\"1\"/>"
                       f"<text x=\"{lx:.1f}\" y=\"{ym + 3.6:.1f}\" font-size=\"10\" font-weight=\"bold\" "
                       f"text-anchor=\"middle\" fill=\"{colour}\">{word}</text></g>")
    for n in nodes:
        b = boxes[n.id]
        ink = "#ffffff" if _dark(b.fill) else INK
        kind = "leaf" if n.is_leaf else "split"
        out.append(f"<g class=\"{kind}\"><rect x=\"{b.x - b.w / 2:.1f}\" y=\"{b.y:.1f}\" width=\"{b.w:.1f}\" "
                   f"height=\"{b.h:.1f}\" rx=\"6\" fill=\"{_hex(b.fill)}\" stroke=\"{FRAME}\" "
                   f"stroke-width=\"{1.6 if n.is_leaf else 0.9}\"/>")
        for j, line in enumerate(b.lines):
            size = SIZE if j == 0 else SMALL
            weight = " font-weight=\"bold\"" if j == 0 else ""
            y = b.y + PAD_Y + LINE * (j + 1) - 3.5
            out.append(f"<text x=\"{b.x:.1f}\" y=\"{y:.1f}\" font-size=\"{size}\"{weight} text-anchor=\"middle\" "
                       f"fill=\"{ink}\">{escape(line)}</text>")
        out.append("</g>")
    out.append(key_lines[0].replace("{Y}", f"{key_y:.1f}"))
    for j, line in enumerate(foot):
        out.append(f"<text x=\"{MARGIN}\" y=\"{key_y + 30 + 16 * j:.1f}\" font-size=\"{SMALL}\" fill=\"{INK}\">"
                   f"{escape(line)}</text>")
    out.append("</svg>")
    return "\n".join(out) + "\n"


def _key_lines(task: str, target: str, classes: list[str] | None, palette: _Palette) -> tuple[str, float]:
    """The colour key as SVG (with ``{Y}`` for its baseline) and its width."""
    parts, x = [], MARGIN
    if task == "regression":
        label = f"predicted {_short(target)}:"
        parts.append(f"<text x=\"{x:.1f}\" y=\"{{Y}}\" font-size=\"{SMALL}\" fill=\"{INK}\">{escape(label)}</text>")
        x += _width(label, SMALL) + 8
        steps = 5
        for j in range(steps):
            v = palette.lo + (palette.hi - palette.lo) * j / (steps - 1)
            text = number(v, 3)
            parts.append(f"<rect x=\"{x:.1f}\" y=\"{{Y}}\" transform=\"translate(0,-10)\" width=\"14\" height=\"12\" "
                         f"rx=\"2\" fill=\"{_hex(_ramp(j / (steps - 1)))}\" stroke=\"{FRAME}\" stroke-width=\"0.6\"/>")
            parts.append(f"<text x=\"{x + 18:.1f}\" y=\"{{Y}}\" font-size=\"{SMALL}\" fill=\"{INK}\">{escape(text)}</text>")
            x += 18 + _width(text, SMALL) + 12
    else:
        label = "most likely class (deeper: more likely):"
        parts.append(f"<text x=\"{x:.1f}\" y=\"{{Y}}\" font-size=\"{SMALL}\" fill=\"{INK}\">{escape(label)}</text>")
        x += _width(label, SMALL) + 8
        for k, name in enumerate(classes or []):
            text = _short(str(name), 18)
            parts.append(f"<rect x=\"{x:.1f}\" y=\"{{Y}}\" transform=\"translate(0,-10)\" width=\"14\" height=\"12\" "
                         f"rx=\"2\" fill=\"{CLASS_COLOURS[k % len(CLASS_COLOURS)]}\" stroke=\"{FRAME}\" "
                         "stroke-width=\"0.6\"/>")
            parts.append(f"<text x=\"{x + 18:.1f}\" y=\"{{Y}}\" font-size=\"{SMALL}\" fill=\"{INK}\">{escape(text)}</text>")
            x += 18 + _width(text, SMALL) + 12
    return "\n".join(parts), x - MARGIN


def _footnotes(nodes: list[TreeNode], note: str | None, chars: int) -> list[str]:
    """Reading notes, wrapped to about ``chars`` characters a line."""
    lines = ["Share of rows: of the discovery rows the tree was grown on. Follow \"yes\" when the box's "
             "condition holds."]
    fills = {}
    for n in nodes:
        if not n.is_leaf and n.level is None and n.feature not in fills:
            fills[n.feature] = n.fill
    missing = "A missing number takes " + ", ".join(f"{_short(f)} = {number(v, 6)}" for f, v in fills.items()) \
        + " before the comparison" if fills else ""
    cats = any(not n.is_leaf and n.level is not None for n in nodes)
    tail = "a missing or unseen category follows \"no\" unless the condition names it" if cats else ""
    if missing or tail:
        lines.append("; ".join(s for s in (missing, tail) if s) + ".")
    if note:
        lines.append(note)
    return [part for line in lines for part in textwrap.wrap(line, chars)]


_FIDELITY_NAMES = {"r2": "R²", "probability_r2": "R² of the class probabilities", "agreement": "label agreement",
                   "kappa": "Cohen's kappa"}


def fidelity_note(fidelity: dict, on: str | None) -> str:
    """One line naming how closely the drawn tree follows the forest, and on which rows."""
    where = "on the test rows" if on == "test" else (f"by {on}" if on else "")
    figures = ", ".join(f"{_FIDELITY_NAMES.get(k, k)} {v:.3f}" for k, v in fidelity.items() if v is not None)
    return f"Fidelity to the forest {where}: {figures}.".replace("  ", " ")

"""The colours every drawing shares (report figures and tree.svg), free of plotting imports.

Our palette: parchment page, deep green for the forest, ochre for the tree, slate for the equation.
"""
from __future__ import annotations

INK = "#1d2a22"
GRID = "#d9d4c0"
PAPER = "#fbfaf5"
FRAME = "#6f6a58"
FOREST = "#3f6a35"
TREE = "#b07a1e"
EQUATION = "#3d5f86"
LOSS = "#9c3f22"
MODEL_COLOURS = {"forest": FOREST, "tree": TREE, "equation": EQUATION}
CLASS_COLOURS = ["#3f6a35", "#b07a1e", "#3d5f86", "#8a4f7d", "#9c3f22", "#5c8a8a", "#6b6b3a", "#a0674b"]
#: Low to high predicted value: parchment, sage, forest green.
VALUE_RAMP = ["#f3ecd2", "#a9bf7e", FOREST]

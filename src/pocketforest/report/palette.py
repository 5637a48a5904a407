"""The report's colours, shared by every page pocketforest writes (report.html, calculator.html)."""

PALETTE = {"ink": "#1d2a22", "green": "#3f6a35", "deep": "#2c4a25", "ochre": "#b07a1e", "slate": "#3d5f86",
           "rule": "#d9d4c0", "paper": "#fbfaf5", "panel": "#f3f0e3"}

#: The palette as CSS custom properties (``var(--green)`` ...).
CSS_VARIABLES = ":root{" + ";".join(f"--{k}:{v}" for k, v in PALETTE.items()) + "}"

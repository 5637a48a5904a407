"""report.html: the page (``page``), its figures (``plots``), shape curves (``shapes``) and the
typeset equation (``mathml``)."""
from .page import CAUTIONS, SECTIONS, render_report

__all__ = ["CAUTIONS", "SECTIONS", "render_report"]

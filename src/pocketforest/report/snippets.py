"""The report's short snippets for the collaborators' forms: R, SPSS syntax, the workbook, the
calculator page, and "why this score". Every name from the data is printed as the target
language's escaped literal first, then HTML-escaped."""
from __future__ import annotations

import html

from ..export.rcode import refit_call, r_str


def _e(x) -> str:
    return html.escape(str(x))


def _r_value(v) -> str:
    if v is None:
        return "NA"
    return r_str(v) if isinstance(v, str) else repr(float(v))


def collaborator_snippets(m: dict, row: dict, present) -> list[str]:
    """HTML pieces; ``present(name)`` says whether the bundle holds a file."""
    parts: list[str] = []
    if present("equation.R"):
        frame = ", ".join(f"{r_str(k)} = {_r_value(v)}" for k, v in row.items())
        lines = ["source(\"equation.R\")" + ("; source(\"tree.R\")" if present("tree.R") else ""),
                 f"new_rows <- data.frame({frame}, check.names = FALSE)",
                 "# or: new_rows <- read.csv(\"new_rows.csv\", check.names = FALSE)",
                 "pocketforest_equation$predict(new_rows)"]
        if present("tree.R"):
            lines.append("pocketforest_tree$predict(new_rows)")
        lines += ["# the same terms refitted on your own rows (with the outcome column):",
                  "# d <- pocketforest_equation$refit_data(my_rows)",
                  "# fit <- " + refit_call(m["equation"]["family"])]
        parts += ["<h3>R (base R, no packages)</h3>", "<pre><code>" + _e("\n".join(lines)) + "</code></pre>"]
    if present("equation.sps"):
        renamed = [(f["name"], f["spss_name"]) for f in m["features"] if f.get("spss_name") not in (None, f["name"])]
        note = ("<p>SPSS names some columns differently; the syntax reads them as "
                + ", ".join(f"<code>{_e(s)}</code> (<code>{_e(n)}</code>)" for n, s in renamed) + ".</p>") if renamed else ""
        parts += ["<h3>SPSS or GNU PSPP</h3>",
                  "<pre><code>* with your data open (variables named as the columns):\n"
                  "INSERT FILE='equation.sps'.\n"
                  "* adds " + ("pred_equation" if m["task"] == "regression" else "label_equation, prob_equation_1 ...")
                  + " to the active dataset.</code></pre>" + note]
    if present("equation.xlsx"):
        parts += ["<h3>Spreadsheet (Excel, LibreOffice Calc)</h3>",
                  "<p>Open <code>equation.xlsx</code> and type values into the empty rows under the reference rows; "
                  "the coloured columns compute the prediction with ordinary formulas that point at the "
                  "<code>coefficients</code> sheet. <code>equation.txt</code> ends with the same as one-cell formulas "
                  "to paste into a sheet of your own.</p>"]
    if present("calculator.html"):
        parts += ["<h3>In a browser</h3>",
                  "<p>Open <code>calculator.html</code>: one field per input, both surrogates' predictions and each "
                  "term's share as you type, a warning outside the training range. It works offline.</p>"]
    why = ("pocketforest score . new_rows.csv --model equation --explain --out why.csv   "
           "# each term's contribution\n" if present("equation.onnx") else "")
    parts += ["<h3>Why this score</h3>",
              "<pre><code>" + why + "pocketforest score . new_rows.csv --model tree --explain --out path.csv      "
              "# the rules each row followed</code></pre>"]
    return parts

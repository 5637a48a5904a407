"""R exports of the equation and the tree: base R only, vectorised over a ``data.frame``.

``source("equation.R")`` defines ``pocketforest_equation``: ``$predict(data)`` scores every row
of a data frame at once, and ``$FORMULA``, ``$FAMILY``, ``$refit_data(data)`` and
``$COEFFICIENTS`` let a reader refit the same terms with ``glm()`` on their own rows.
``source("tree.R")`` defines ``pocketforest_tree`` with ``$predict(data)``.

Missing values follow every other form: NA (or an empty or missing-value text) in a number takes
the recorded fill, in a category the level ""; an unseen category matches no level. Column
names, levels and class labels reach the code only as string literals with every character
outside printable ASCII escaped (``\\n``, ``\\u{...}``), so a name can never end a literal or a
comment; inputs are bound to generated names (``x0``, ``c1``, ...).
"""
from __future__ import annotations

from ..intake.values import MISSING_TOKENS
from ..thresholds import double_split
from .breakdown import blocks
from .dialect import Dialect, Inputs, plain_number, print_expr
from .tree_spec import TreeNode

_ESCAPES = {"\\": "\\\\", '"': '\\"', "\n": "\\n", "\r": "\\r", "\t": "\\t"}


def r_str(value: str) -> str:
    """A double-quoted, ASCII-only R string literal (R's own escapes; R has no NUL in strings)."""
    out = []
    for ch in str(value):
        code = ord(ch)
        if ch in _ESCAPES:
            out.append(_ESCAPES[ch])
        elif code == 0:
            raise ValueError("R strings cannot hold the NUL character")
        elif 32 <= code < 127:
            out.append(ch)
        elif code <= 0xFFFF:
            out.append(f"\\u{{{code:04x}}}")
        else:
            out.append(f"\\U{{{code:08x}}}")
    return '"' + "".join(out) + '"'


def r_exact(value: float) -> str:
    """R's hexadecimal double literal (``0x1.8p-3``), read back bit for bit. R's decimal reader is
    not correctly rounded (measured: 2 in 60,000 shortest decimals came back one unit in the last
    place off), which would move a row sitting exactly at a split of the tree."""
    text = float(value).hex()
    return f"({text})" if text.startswith("-") else text


def _rows(items: list[str], pad: str = "    ") -> str:
    """Arguments one per line, for a long vector a person reads."""
    return "\n" + pad + (",\n" + pad).join(items)


def r_strings(values) -> str:
    return "c(" + ", ".join(r_str(v) for v in values) + ")" if values else "character(0)"


R = Dialect(number=plain_number, text=r_str,
            is_level=lambda var, lit: f"as.numeric({var} == {lit})",
            square=lambda a: f"{a}^2", pos=lambda a: f"pmax({a}, 0)", log=lambda a: f"log({a})")

# the missing-value texts come from intake's one list (values.MISSING_TOKENS), like every export's
_HELPERS = "  .MISSING_TEXT <- " + r_strings(sorted(MISSING_TOKENS)) + r'''

  .column <- function(data, name) {
    if (!is.data.frame(data)) stop("pass a data.frame", call. = FALSE)
    if (!(name %in% names(data))) {
      stop("input column ", encodeString(name, quote = '"'),
           " is missing from the data (use NA for a missing value)", call. = FALSE)
    }
    data[[name]]
  }

  # A number; NA, NaN, an empty or missing-value text takes the training fill.
  .num <- function(data, name, fill) {
    v <- .column(data, name)
    if (is.factor(v)) v <- as.character(v)
    if (is.character(v)) {
      v <- trimws(v)
      v[v %in% .MISSING_TEXT] <- NA
      n <- suppressWarnings(as.numeric(v))
      bad <- !is.na(v) & is.na(n)
      if (any(bad)) {
        stop("input column ", encodeString(name, quote = '"'), " must be a number, not ",
             encodeString(v[which(bad)[1]], quote = '"'), call. = FALSE)
      }
      v <- n
    }
    v <- as.numeric(v)
    v[is.na(v)] <- fill
    v
  }

  # A category as the text it was trained on; missing is the level "".
  .cat <- function(data, name) {
    v <- .column(data, name)
    if (is.logical(v)) {
      v <- ifelse(v, "True", "False")
    } else if (is.numeric(v)) {
      whole <- !is.na(v) & is.finite(v) & v == round(v)
      v <- ifelse(whole, sprintf("%.0f", v), as.character(v))
    }
    v <- trimws(as.character(v))
    v[is.na(v) | v %in% .MISSING_TEXT] <- ""
    v
  }

  # Class probabilities from linear predictors (reference class first, at 0), written as
  # 1 / sum(exp(e_j - e_k)) so large scores do not overflow.
  .probabilities <- function(eta) {
    e <- cbind(0, eta)
    p <- matrix(sapply(seq_len(ncol(e)), function(k) 1 / rowSums(exp(e - e[, k]))), nrow = nrow(e))
    # a score that is not finite is a missing prediction, as in every other form
    p[!apply(is.finite(e), 1, all), ] <- NA
    p
  }

  .result <- function(p) {
    colnames(p) <- paste0("prob_", CLASSES)
    out <- data.frame(label = CLASSES[max.col(p, ties.method = "first")], stringsAsFactors = FALSE)
    cbind(out, as.data.frame(p, check.names = FALSE, stringsAsFactors = FALSE))
  }
'''


def _header(kind: str, meta: dict, usage: list[str]) -> list[str]:
    classes = meta.get("classes") or []
    return ([f"# pocketforest {kind} export for R: base R only, no packages.", "#"] + usage +
            ["# Regression gives a numeric vector; classification a data.frame with `label` and one",
             "# probability column per class (prob_<class>). A missing value is NA. Names, levels and",
             "# classes are given below as data (INPUTS, CLASSES, TERMS).",
             f"pocketforest_{kind} <- local({{",
             f"  TARGET <- {r_str(meta['target'])}",
             f"  TASK <- {r_str(meta['task'])}",
             f"  CLASSES <- {r_strings(classes)}",
             f"  TOOL_VERSION <- {r_str(meta['tool_version'])}",
             "", _HELPERS])


def _bind(inputs: Inputs, pad: str = "    ", number=plain_number) -> list[str]:
    out = []
    for ref in inputs:
        if ref.kind == "numeric":
            out.append(f"{pad}{ref.var} <- .num(data, {r_str(ref.feature)}, {number(ref.fill)})")
        else:
            out.append(f"{pad}{ref.var} <- .cat(data, {r_str(ref.feature)})")
    return out


def _inputs_table(inputs: Inputs) -> str:
    refs = list(inputs)
    return "c(" + ", ".join(f"{r.var} = {r_str(r.feature)}" for r in refs) + ")" if refs else "character(0)"


_FAMILIES = {("gaussian", "identity"): "gaussian(link = \"identity\")", ("poisson", "log"): "poisson(link = \"log\")",
             ("binomial", "logit"): "binomial(link = \"logit\")"}


def refit_call(family: str) -> str:
    """How to refit the same terms in R: glm() where base R has the family."""
    if family == "multinomial":
        return "nnet::multinom(pocketforest_equation$FORMULA, data = d)   # several classes: not glm()"
    if family == "negative_binomial":
        return "MASS::glm.nb(pocketforest_equation$FORMULA, data = d)   # estimates the dispersion too"
    return "glm(pocketforest_equation$FORMULA, family = pocketforest_equation$FAMILY, data = d)"


def equation_r(eq, meta: dict) -> str:
    inputs = Inputs()
    design = [print_expr(c.node, R, inputs) for c in eq.columns]
    terms = ["(Intercept)"] + [c.label for c in eq.columns]
    coef_blocks = blocks(eq)
    if len(coef_blocks) == 1:
        coef_lines = ["  COEFFICIENTS <- c(" + _rows([plain_number(b) for b in coef_blocks[0][1]]) + ")",
                      "  names(COEFFICIENTS) <- TERMS"]
    else:
        per_term = [f"c({', '.join(plain_number(v[j]) for _, v in coef_blocks)})" for j in range(len(terms))]
        coef_lines = ["  # one row per term (as TERMS), one column per class against the first",
                      "  COEFFICIENTS <- rbind(" + _rows(per_term) + ")",
                      f"  dimnames(COEFFICIENTS) <- list(TERMS, {r_strings([c for c, _ in coef_blocks])})"]
    family = _FAMILIES.get((eq.family, eq.link))
    rhs = " +\n    ".join(f"I({d})" for d in design) or "1"
    usage = ["# Score:   source(\"equation.R\"); pocketforest_equation$predict(my_data)",
             "# Refit the same terms on your own rows (inputs imputed as here, the outcome as y):",
             "#   d <- pocketforest_equation$refit_data(my_rows)",
             "#   fit <- " + refit_call(eq.family),
             "#   cbind(exported = pocketforest_equation$COEFFICIENTS, refitted = coef(fit))"]
    lines = _header("equation", meta, usage)
    lines += [f"  FAMILY_NAME <- {r_str(eq.family)}",
              f"  LINK <- {r_str(eq.link)}",
              f"  FAMILY <- {family or 'NULL'}",
              f"  FIT_ON <- {r_str(eq.fit_on)}",
              "  # generated input name = column in the data",
              f"  INPUTS <- {_inputs_table(inputs)}",
              "  # one label per coefficient, intercept first",
              "  TERMS <- c(" + _rows([r_str(t) for t in terms]) + ")",
              *coef_lines,
              "  # the terms as glm() reads them, over the generated input names",
              f"  FORMULA <- y ~ {rhs}",
              "",
              "  inputs <- function(data) {"] + _bind(inputs)
    names = ", ".join(r.var for r in inputs)
    lines += [f"    data.frame({names}{', ' if names else ''}check.names = FALSE, stringsAsFactors = FALSE)"
              if names else "    data.frame(row.names = seq_len(nrow(data)))",
              "  }",
              "",
              "  refit_data <- function(data) {",
              "    d <- inputs(data)",
              "    y <- .column(data, TARGET)",
              ("    d$y <- as.numeric(y)" if eq.task == "regression" else
               "    d$y <- factor(trimws(as.character(y)), levels = CLASSES)"),
              "    d",
              "  }",
              "",
              "  design <- function(data) {"] + _bind(inputs)
    cols = _rows(["rep(1, nrow(data))"] + design, pad="      ")
    lines += [f"    x <- cbind({cols})", "    colnames(x) <- TERMS", "    x", "  }", "",
              "  predict <- function(data) {",
              "    eta <- design(data) %*% COEFFICIENTS"]
    if eq.task == "regression":
        # a value that is not finite is a missing prediction, as in every other form
        value = "drop(eta)" if eq.link == "identity" else "exp(drop(eta))"
        lines.append(f"    v <- {value}; v[!is.finite(v)] <- NA; v")
    else:
        lines.append("    .result(.probabilities(eta))")
    lines += ["  }", "",
              "  list(predict = predict, design = design, inputs = inputs, refit_data = refit_data,",
              "       FORMULA = FORMULA, FAMILY = FAMILY, COEFFICIENTS = COEFFICIENTS, TERMS = TERMS,",
              "       INPUTS = INPUTS, TARGET = TARGET, TASK = TASK, CLASSES = CLASSES, LINK = LINK,",
              "       FIT_ON = FIT_ON, TOOL_VERSION = TOOL_VERSION)",
              "})"]
    return "\n".join(lines) + "\n"


def _paths(nodes: list[TreeNode], inputs: Inputs) -> list[tuple[int, list[str]]]:
    """(leaf node, the conditions that lead to it) for every leaf, left to right."""
    out: list[tuple[int, list[str]]] = []

    def walk(i: int, conds: list[str]) -> None:
        node = nodes[i]
        if node.is_leaf:
            out.append((i, conds))
            return
        if node.level is None:
            op, bound = double_split(node.threshold)
            x = inputs.numeric(node.feature, node.fill)
            other = ">" if op == "<=" else ">="
            walk(node.left, conds + [f"{x} {op} {r_exact(bound)}"])
            walk(node.right, conds + [f"{x} {other} {r_exact(bound)}"])
        else:
            c = inputs.categorical(node.feature)
            walk(node.left, conds + [f"{c} != {r_str(node.level)}"])
            walk(node.right, conds + [f"{c} == {r_str(node.level)}"])

    walk(0, [])
    return out


def tree_r(nodes: list[TreeNode], meta: dict) -> str:
    inputs = Inputs()
    paths = _paths(nodes, inputs)
    usage = ["# Score:   source(\"tree.R\"); pocketforest_tree$predict(my_data)",
             "# $leaf(data) gives the leaf each row reaches (numbered left to right, as in LEAVES).",
             "# Split points and fills are written in R's exact hexadecimal notation (0x1.8p-3 = 0.1875):",
             "# a decimal can be read one unit in the last place off and move a row sitting at a split.",
             "# tree.txt shows the same rules in decimal."]
    lines = _header("tree", meta, usage)
    lines += ["  # generated input name = column in the data",
              f"  INPUTS <- {_inputs_table(inputs)}"]
    if meta["task"] == "regression":
        lines.append("  LEAVES <- c(" + ", ".join(plain_number(nodes[i].value[0]) for i, _ in paths) + ")")
    else:
        rows = ",\n    ".join("c(" + ", ".join(plain_number(p) for p in nodes[i].value) + ")" for i, _ in paths)
        lines += [f"  LEAVES <- rbind(\n    {rows})", "  colnames(LEAVES) <- CLASSES"]
    lines += ["", "  leaf <- function(data) {"] + _bind(inputs, number=r_exact)
    lines.append("    out <- rep(NA_integer_, nrow(data))")
    for k, (_, conds) in enumerate(paths, start=1):
        lines.append(f"    out[{' & '.join(conds) if conds else 'TRUE'}] <- {k}L")
    lines += ["    out", "  }", "", "  predict <- function(data) {", "    k <- leaf(data)"]
    lines.append("    LEAVES[k]" if meta["task"] == "regression" else "    .result(LEAVES[k, , drop = FALSE])")
    lines += ["  }", "",
              "  list(predict = predict, leaf = leaf, LEAVES = LEAVES, INPUTS = INPUTS, TARGET = TARGET,",
              "       TASK = TASK, CLASSES = CLASSES, TOOL_VERSION = TOOL_VERSION)",
              "})"]
    return "\n".join(lines) + "\n"

"""`python -m pocketforest.bench`: the contract's figures, measured on this machine.

Every figure is a ratio of two things measured side by side in the same run, printed with its
target and a pass/short mark; ``--quick`` runs small sizes (a smoke run for the tests, nothing
judged) and ``--out`` also writes the results as JSON.

Sections, each a submodule with ``run(quick, root, say) -> common.Section``:

* :mod:`.speed`  — distill, scoring, memory and size figures (always run);
* :mod:`.honest` — null rejection and loss-interval coverage from :mod:`pocketforest.simulate`
  (always run);
* :mod:`.cluster` — ``--cluster``: score on a local Dask cluster against one process, and
  ``distill --sample`` with its self-check, on 10,000,000 rows of Parquet.
* :mod:`.anchor` — the equation against hand-built GLMs on public tables (``--anchor``);
* :mod:`.power`  — planted-truth recovery and noise by size (``--power``).

``--only NAME,...`` runs just the named sections (e.g. ``--only anchor`` while changing discovery);
a section may add its own options (``add_arguments``/``options``), e.g. ``--power-sizes``.

A new section (power, anchor, tree, cluster, ...) is a new submodule registered in
:data:`.cli.SECTIONS` with its own flag; :mod:`.common` holds what sections share (the seeded
data, :class:`~.common.Figure`, judging, child processes, timing).
"""

"""The scoring side: everything that works from a bundle alone, without the fitting libraries.

``bundle_io`` (safe reading and checksums), ``runtime`` (onnxruntime sessions), ``score`` (the
streaming ``score`` command), ``runners`` (SQLite, DuckDB, a separate Python interpreter, Node.js
with the scripts in ``node/``), ``verify`` (checksums and parity of every exported form) and
``compare`` (new labelled rows: metrics, fidelity, loss, drift).

None of these imports scikit-learn or statsmodels, so a bundle scores in a slim environment;
``compare`` alone uses scikit-learn's metrics, the reference library for every figure
(``tests/scoring/test_no_fitting_imports.py`` holds both rules). This file imports nothing, so
loading one module does not load the others.
"""

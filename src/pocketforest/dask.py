"""The Python API for Dask: ``pocketforest.dask.score(ddf, bundle, model=...)`` returns a Dask DataFrame.

Everything lives in :mod:`pocketforest.scoring.cluster` (what runs on the client, what on each
worker, how the bundle is checked on both); this module is the short name users import.
"""
from __future__ import annotations

from .scoring.cluster import BundleRef, check_bundle, local_cluster, score, score_files, worker_scorer

__all__ = ["BundleRef", "check_bundle", "local_cluster", "score", "score_files", "worker_scorer"]

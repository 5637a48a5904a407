"""Reading a bundle safely: manifest checks and checksummed artifact paths.

Kept free of the fitting libraries so that scoring and verifying run in a slim environment.
"""
from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path

from ..errors import BundleError

FORMAT = "pocketforest-bundle"
FORMAT_VERSION = 1


def sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def read_manifest(bundle: str | os.PathLike) -> dict:
    """Load and sanity-check a bundle's manifest (never executes anything from the bundle)."""
    root = Path(bundle)
    path = root / "manifest.json"
    if not root.is_dir():
        raise BundleError(f"bundle folder {root} not found: pass the folder that holds manifest.json")
    if not path.is_file():
        raise BundleError(f"{path} is missing: {root} is not a pocketforest bundle")
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise BundleError(f"{path} is not valid JSON ({exc}); the bundle is damaged: write it again") from None
    if not isinstance(manifest, dict) or manifest.get("format") != FORMAT:
        raise BundleError(f"{path} is not a pocketforest manifest (format is not '{FORMAT}')")
    if manifest.get("format_version") != FORMAT_VERSION:
        raise BundleError(f"{path} has format_version {manifest.get('format_version')!r}; "
                          f"this pocketforest reads version {FORMAT_VERSION}")
    for name in manifest.get("artifacts", {}):
        if not _safe_name(name):
            raise BundleError(f"{path} names the file {name!r}, which is outside the bundle: refusing it")
    return manifest


def _safe_name(name: str) -> bool:
    return (isinstance(name, str) and name not in ("", ".", "..") and "/" not in name and "\\" not in name
            and not name.startswith(".") and os.path.basename(name) == name)


def bundle_file(bundle: str | os.PathLike, manifest: dict, name: str, *, check: bool = True) -> Path:
    """Path of an artifact, checked against the manifest's sha256."""
    if name not in manifest.get("artifacts", {}):
        raise BundleError(f"the manifest of {bundle} lists no {name}: the bundle is incomplete")
    path = Path(bundle) / name
    if not path.is_file():
        raise BundleError(f"{path} is missing from the bundle: copy the whole folder again")
    if check and sha256(path) != manifest["artifacts"][name]:
        raise BundleError(f"{path} does not match its checksum in manifest.json: the file was altered")
    return path


def equation_absent(manifest: dict) -> dict | None:
    """The manifest's record of why the bundle has no equation (``equation.absent``), or None."""
    eq = manifest.get("equation")
    return eq if isinstance(eq, dict) and eq.get("absent") is True else None


def models_of(manifest: dict) -> tuple[str, ...]:
    """The models a bundle holds: the forest and the tree always, the equation unless absent."""
    return ("forest", "tree") if equation_absent(manifest) else ("forest", "tree", "equation")


def require_model(manifest: dict, model: str) -> None:
    """Refuse a model the bundle does not hold, with the manifest's reason and what to use instead."""
    absent = equation_absent(manifest)
    if model == "equation" and absent is not None:
        rows = absent.get("rows_needed")
        raise BundleError(f"this bundle has no equation: its confirmation rows were too few to estimate one "
                          f"honestly (about {rows} rows in the table would be needed); use --model forest or "
                          "--model tree")

"""The provenance record of a run (``manifest.json``)."""

from __future__ import annotations

import hashlib
import json
import platform
import sys
from collections.abc import Iterable, Mapping
from importlib import metadata
from pathlib import Path
from typing import Any


def sha256(path: str | Path) -> str:
    """SHA-256 of a file's bytes, as hex."""
    digest = hashlib.sha256()
    with Path(path).open("rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


PACKAGES = (
    "cohort",
    "numpy",
    "pandas",
    "scipy",
    "statsmodels",
    "pingouin",
    "matplotlib",
    "openpyxl",
)


def package_versions(names: Iterable[str] = PACKAGES) -> dict[str, str]:
    """Installed versions of the packages a run depends on ("not installed" when absent)."""
    versions = {}
    for name in names:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def build_manifest(
    *,
    inputs: Mapping[str, Path],
    input_names: Mapping[str, str | None] | None = None,
    digests: Mapping[str, str] | None = None,
    settings: Mapping[str, Any],
    options: Mapping[str, Any],
    started: str,
    finished: str,
    warnings: Iterable[str],
    outputs: Iterable[str],
    accounting: Mapping[str, int],
) -> dict[str, Any]:
    """Everything needed to say what a run was: inputs with SHA-256, settings, versions.

    Inputs are recorded by role with their SHA-256 and size, and by the name in
    ``input_names`` (relative to the study file; ``None`` in a pseudonymised run): never by
    absolute path, which can hold a person's name or number. ``digests`` are SHA-256 hashes
    the caller already computed (a run hashes its inputs to see that they did not change);
    inputs without one are hashed here.
    """
    names = dict(input_names or {})
    digests = dict(digests or {})
    return {
        "tool": "cohort",
        "caution": "Research use only; not a diagnostic device. Thresholds need local validation.",
        "inputs": {
            key: {
                "name": names.get(key, Path(path).name),
                "sha256": digests.get(key) or sha256(path),
                "bytes": Path(path).stat().st_size,
            }
            for key, path in inputs.items()
        },
        "settings": dict(settings),
        "options": dict(options),
        "record_accounting": dict(accounting),
        "python": sys.version.split()[0],
        "platform": platform.platform(),
        "packages": package_versions(),
        "started": started,
        "finished": finished,
        "warnings": list(warnings),
        "outputs": sorted(outputs),
    }


def write_manifest(manifest: Mapping[str, Any], path: Path) -> Path:
    path.write_text(json.dumps(manifest, indent=2, sort_keys=False, default=str) + "\n")
    return path

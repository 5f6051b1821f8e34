"""Shared test helpers.

``require(tool)`` is how a test asks for an external program: locally a
missing one skips with the reason printed (pytest runs with -ra); in CI
(CI=true) it fails, because CI installs everything and a silent skip would
hide a missing install step.
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from hypothesis import settings

IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")

# CI replays the same examples every run so a red build always reproduces;
# local runs draw new ones and keep what fails in .hypothesis/.
settings.register_profile("ci", derandomize=True, print_blob=True)
if IN_CI:
    settings.load_profile("ci")


def require(tool: str) -> str:
    """Path of an executable on PATH (or beside this Python), else skip locally / fail in CI."""
    path = shutil.which(tool) or shutil.which(tool, path=str(Path(sys.executable).parent))
    if path:
        return path
    message = f"'{tool}' is not installed (install it, or see .ci/run)"
    if IN_CI:
        pytest.fail(message)
    pytest.skip(message)


def run_affix(*args, cwd=None, **options) -> subprocess.CompletedProcess:
    """Run the real CLI in a child process, as a user would; ``options`` go to subprocess.run."""
    return subprocess.run(
        [sys.executable, "-m", "affix", *map(str, args)],
        capture_output=True,
        text=True,
        cwd=cwd,
        **options,
    )


@pytest.fixture
def affix_cli():
    return run_affix


def rehash(manifest_path) -> None:
    """Record the current SHA-256 of every file a manifest lists: what a faulty
    emitter would have written, so verification must find the fault by running
    the code rather than by the hash."""
    import hashlib
    import json

    manifest_path = Path(manifest_path)
    manifest = json.loads(manifest_path.read_text())
    for filename in manifest["file_sha256"]:
        manifest["file_sha256"][filename] = hashlib.sha256((manifest_path.parent / filename).read_bytes()).hexdigest()
    manifest_path.write_text(json.dumps(manifest, indent=2) + "\n")

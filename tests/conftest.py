"""Shared pytest set-up for the Python tests.

- Makes the helper modules in this folder (``_shift_cases``) importable from every test file
  (pytest runs with ``--import-mode=importlib``, which does not put the test folder on ``sys.path``).
- ``cli``: the path of the ``shiftweight`` command, built once per session with cargo (a no-op when
  ``make test`` has already built it in its Rust step); honours ``CARGO_TARGET_DIR``.
"""

import os
import pathlib
import subprocess
import sys

import pytest

HERE = pathlib.Path(__file__).resolve().parent
ROOT = HERE.parent

if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))


@pytest.fixture(scope="session")
def cli() -> pathlib.Path:
    subprocess.run(["cargo", "build", "-q", "-p", "shiftweight-cli"], cwd=ROOT, check=True)
    return pathlib.Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target")) / "debug" / "shiftweight"

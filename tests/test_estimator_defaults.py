"""Each estimator's defaults are declared once, in the Rust core (its `Default`); the Python
constructors, the type stub and the command line must say the same. These tests fail on any
difference, naming the parameter."""

import ast
import inspect
import pathlib
import re
import subprocess

import pytest

import shiftweight as sw
from shiftweight import _native

ROOT = pathlib.Path(__file__).resolve().parents[1]

CLASSES = {
    "least_squares": sw.LeastSquaresRatio,
    "kliep": sw.KLRatio,
    "kmm": sw.KernelMeanMatching,
    "classifier": sw.ClassifierRatio,
    "auto": sw.AutoRatio,
}


def _plain(v):
    """Tuples (Python defaults) and lists (JSON) compare as lists."""
    return [_plain(x) for x in v] if isinstance(v, (tuple, list)) else v


@pytest.mark.parametrize("kind", sorted(CLASSES))
def test_python_constructor_defaults_equal_the_core_defaults(kind):
    core = _native.estimator_defaults()[kind]
    params = inspect.signature(CLASSES[kind].__init__).parameters
    python = {n: p.default for n, p in params.items() if n != "self"}
    if kind == "auto":
        # `candidates` is Python-only (None: the core's own default list).
        assert python.pop("candidates") is None
    assert sorted(python) == sorted(core), f"{kind}: parameter names differ from the core configuration"
    for name, value in core.items():
        assert _plain(python[name]) == value, f"{kind}.{name}: Python default {python[name]!r}, core {value!r}"


def test_every_python_estimator_sends_every_core_field():
    # The binding builds each core configuration from the dict `_native_params()` returns; a
    # missing or extra key would fail there, so check the key sets here too.
    defaults = _native.estimator_defaults()
    for kind, cls in CLASSES.items():
        if kind == "auto":
            continue
        assert sorted(cls()._native_params()) == sorted(defaults[kind]), kind


def test_the_stub_carries_no_estimator_defaults():
    # The stub declares the one fit function with a parameter dict: no default of an estimator
    # is written there, so none can drift. Fail if one reappears.
    tree = ast.parse((ROOT / "python" / "shiftweight" / "_native.pyi").read_text())
    fits = {n.name: n for n in tree.body if isinstance(n, ast.FunctionDef) and n.name.startswith("fit_")}
    assert "fit_ratio" in fits
    for name in ("fit_least_squares", "fit_kliep", "fit_kmm", "fit_classifier"):
        assert name not in fits, f"{name} is back in the stub with its own parameter list"
    args = fits["fit_ratio"].args
    defaulted = [a.arg for a in args.args[len(args.args) - len(args.defaults) :]]
    assert defaulted == ["feature_names"]


@pytest.fixture(scope="module")
def cli_help(cli):
    out = subprocess.run([str(cli), "weigh", "--help"], capture_output=True, text=True, check=True)
    return out.stdout


def _cli_default(text, option):
    block = re.search(rf"--{option}\b.*?(?=\n\s*--|\Z)", text, re.S)
    assert block, f"--{option} is missing from `shiftweight weigh --help`"
    found = re.search(r"\[default: ([^\]]+)\]", block.group(0))
    assert found, f"--{option} states no default"
    return found.group(1)


def test_cli_help_defaults_equal_the_core_defaults(cli_help):
    core = _native.estimator_defaults()
    assert int(_cli_default(cli_help, "n-basis")) == core["least_squares"]["n_basis"]
    assert int(_cli_default(cli_help, "n-basis")) == core["kliep"]["n_basis"]
    assert float(_cli_default(cli_help, "alpha")) == core["rulsif_alpha"]

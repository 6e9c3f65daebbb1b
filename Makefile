# One task runner. `make test` is the README's test command and what CI runs: on a fresh machine it
# creates the Python virtual environment, installs the test dependencies, builds the extension
# once, runs the lints (Rust formatting, clippy, rustdoc with every public item documented, ruff,
# mypy), then the Rust and Python test suites.
VENV ?= .venv
PY := $(VENV)/bin/python
export VIRTUAL_ENV := $(abspath $(VENV))
export PATH := $(abspath $(VENV))/bin:$(PATH)

.PHONY: study test test-rust test-python develop develop-release venv lint fmt bench compare compare-quick demo clean

test: lint test-rust test-python

$(PY):
	python3 -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip "maturin>=1.5,<2"

venv: $(PY)

# Builds the extension (dev profile: dependencies are optimised, see Cargo.toml) and installs the
# package with its test extras into the virtual environment.
develop: $(PY)
	$(VENV)/bin/maturin develop --quiet --extras test --features test-hooks

test-rust:
	cargo test --workspace --exclude shiftweight-py

# The stub of the compiled module must match it and cover every name it exports; fails otherwise.
test-python: develop
	$(PY) -m mypy.stubtest shiftweight._native --allowlist stubtest-allowlist.txt
	$(PY) -m pytest

# Long seeded statistical studies (pytest marker `study`, Rust tests marked #[ignore]): not part of
# `make test`, so the contributor loop stays short; CI (.ci/run) runs them after it.
study: develop
	cargo test --workspace --exclude shiftweight-py -- --ignored
	$(PY) -m pytest -m study

# ruff and mypy come with the test extras (installed by `develop`); their settings are in pyproject.toml.
lint: develop
	cargo fmt --all --check
	cargo clippy --workspace --all-targets -- -D warnings
	RUSTDOCFLAGS="-D warnings" cargo doc --no-deps -q -p shiftweight -p shiftweight-report
	$(VENV)/bin/ruff check python tests
	$(VENV)/bin/mypy

fmt:
	cargo fmt --all

bench:
	cargo bench -p shiftweight

# Side-by-side timings against numpy / scipy / scikit-learn (not part of the test suite; see
# benches/README.md). Builds the extension in release mode first: dev-build timings mean nothing.
develop-release: $(PY)
	$(VENV)/bin/maturin develop --release --quiet --extras test

compare: develop-release
	$(PY) benches/compare.py $(ARGS)

compare-quick: develop-release
	$(PY) benches/compare.py --quick $(ARGS)

demo:
	cargo run --release -p shiftweight-cli -- demo

clean:
	cargo clean
	rm -rf $(VENV)

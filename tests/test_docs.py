"""The Python code blocks of README.md and docs/*.md run.

Each page's blocks run in order in one namespace (a later block may use names an earlier one
defined), in a temporary working directory. A block is skipped only when its fence says so with
```python no-run``, and the text just above it must then say why it is not run ("not run ...").
Rust blocks are compiled and run as doctests of the core crate (`cargo test -p shiftweight --doc`).
"""

from __future__ import annotations

import pathlib
import re
from typing import Any, Dict, List, Tuple

import pytest

ROOT = pathlib.Path(__file__).resolve().parents[1]
PAGES = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
FENCE = re.compile(r"^```(\S*)(.*)$")


def python_blocks(path: pathlib.Path) -> List[Tuple[int, str, bool, str]]:
    """(first line number, code, runnable, text above the block) for every ```python block."""
    lines = path.read_text(encoding="utf-8").split("\n")
    blocks, i = [], 0
    while i < len(lines):
        m = FENCE.match(lines[i])
        if m and m.group(1):
            lang, info, start = m.group(1), m.group(2).split(), i + 1
            j = start
            while not lines[j].startswith("```"):
                j += 1
            if lang == "python":
                above = " ".join(lines[max(0, i - 4) : i])
                blocks.append((start + 1, "\n".join(lines[start:j]), "no-run" not in info, above))
            i = j + 1
        else:
            i += 1
    return blocks


def _id(p: pathlib.Path) -> str:
    return str(p.relative_to(ROOT))


@pytest.mark.parametrize("page", [p for p in PAGES if python_blocks(p)], ids=_id)
def test_python_blocks_run(page, tmp_path, monkeypatch):
    pytest.importorskip("matplotlib").use("Agg")
    monkeypatch.chdir(tmp_path)
    namespace: Dict[str, Any] = {"__name__": "__docs__"}
    for line, code, runnable, _ in python_blocks(page):
        if runnable:
            exec(compile(code, f"{_id(page)}:{line}", "exec"), namespace)


@pytest.mark.parametrize("page", PAGES, ids=_id)
def test_skipped_blocks_say_why(page):
    for line, _, runnable, above in python_blocks(page):
        assert runnable or "not run" in above, f"{_id(page)}:{line}: a no-run block needs a reason above it"


def test_every_page_with_rust_blocks_is_a_doctest():
    lib = (ROOT / "crates" / "shiftweight" / "src" / "lib.rs").read_text(encoding="utf-8")
    for page in PAGES:
        if "```rust" in page.read_text(encoding="utf-8"):
            rel = _id(page)
            assert f'include_str!("../../../{rel}")' in lib, f"{rel} has Rust blocks but is not a doctest"

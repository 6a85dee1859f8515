"""The example notebooks are fit to ship: each carries the caution and is committed without outputs.

Executing them is `make test-notebooks` (nbconvert), which CI runs; this file checks what
execution cannot: the text a reader sees first and the committed form.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

EXAMPLES = sorted((Path(__file__).resolve().parents[1] / "examples").glob("*.ipynb"))


def test_there_are_examples() -> None:
    assert len(EXAMPLES) >= 3


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_example_carries_the_caution(path: Path) -> None:
    nb = json.loads(path.read_text(encoding="utf-8"))
    text = " ".join("".join(c["source"]) for c in nb["cells"] if c["cell_type"] == "markdown")
    flat = " ".join(text.split()).lower()
    assert "not for clinical or dosing decisions" in flat, f"{path.name} lacks the caution"
    assert "qa" in flat and "regulations" in flat


@pytest.mark.parametrize("path", EXAMPLES, ids=lambda p: p.name)
def test_example_is_committed_without_outputs(path: Path) -> None:
    nb = json.loads(path.read_text(encoding="utf-8"))
    for cell in nb["cells"]:
        if cell["cell_type"] == "code":
            assert cell.get("outputs", []) == [], f"{path.name} was committed with outputs"
            assert cell.get("execution_count") is None

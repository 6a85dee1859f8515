"""The README's Python examples run as written (documentation that cannot drift from the API)."""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import pytest

README = Path(__file__).resolve().parents[1] / "README.md"
BLOCKS = re.findall(r"```python\n(.*?)```", README.read_text(), flags=re.S)


def test_readme_has_examples() -> None:
    assert len(BLOCKS) >= 2


@pytest.mark.parametrize("index", range(len(BLOCKS)))
def test_readme_block_runs(index: int) -> None:
    with warnings.catch_warnings():
        # The examples may legitimately warn (an extrapolated reading); running is the check.
        warnings.simplefilter("ignore")
        exec(compile(BLOCKS[index], f"README block {index}", "exec"), {})

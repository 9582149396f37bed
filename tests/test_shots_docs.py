"""Every ```python block of docs/shots-and-noise.md runs (each in a fresh namespace)."""
import pathlib
import re

import pytest

DOC = pathlib.Path(__file__).resolve().parents[1] / "docs" / "shots-and-noise.md"
BLOCKS = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)


def test_the_page_has_examples():
    assert len(BLOCKS) >= 5


@pytest.mark.parametrize("i", range(len(BLOCKS)))
def test_doc_block_runs(i, capsys):
    exec(compile(BLOCKS[i], f"{DOC.name}[block {i}]", "exec"), {"__name__": "__doc_example__"})

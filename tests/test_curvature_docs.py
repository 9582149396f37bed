"""Every ```python block of docs/curvature.md runs, and the curvature docstring examples hold."""
import doctest
import re
from pathlib import Path

import pytest

import qgradlib.curvature
import qgradlib.metric
import qgradlib.stencils

DOC = Path(__file__).resolve().parents[1] / "docs" / "curvature.md"
BLOCKS = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)


def test_the_page_has_examples():
    assert len(BLOCKS) >= 4


@pytest.mark.parametrize("k", range(len(BLOCKS)))
def test_doc_block_runs(k, capsys):
    exec(compile(BLOCKS[k], f"{DOC.name}[block {k}]", "exec"), {"__name__": "__doc_example__"})


@pytest.mark.parametrize("module", [qgradlib.curvature, qgradlib.metric, qgradlib.stencils])
def test_docstring_examples(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0

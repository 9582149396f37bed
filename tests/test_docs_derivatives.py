"""docs/derivatives.md: every python block runs (in order, one namespace), and the doctests
of the modules it documents pass."""
import doctest
import pathlib
import re
import warnings

import pytest

import qgradlib.adjoint_nested
import qgradlib.check

DOC = pathlib.Path(__file__).resolve().parents[1] / "docs" / "derivatives.md"


def test_python_blocks_run(capsys):
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(), re.S)
    assert len(blocks) >= 8
    namespace = {}
    with warnings.catch_warnings():
        warnings.simplefilter("error")           # the examples must not warn either
        for k, code in enumerate(blocks):
            try:
                exec(compile(code, f"{DOC.name}[block {k}]", "exec"), namespace)
            except Exception as exc:            # name the block that failed
                pytest.fail(f"block {k} of {DOC.name} raised {exc!r}:\n{code}")


@pytest.mark.parametrize("module", [qgradlib.check, qgradlib.adjoint_nested])
def test_module_doctests(module):
    result = doctest.testmod(module, optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0


def test_fd_table_is_the_script_output_format():
    # the table in the doc sits between the markers the benchmark script rewrites
    text = DOC.read_text()
    assert "<!-- fd-table start -->" in text and "<!-- fd-table end -->" in text
    assert "benchmarks/fd_tradeoff.py" in text

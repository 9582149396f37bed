"""Every ```python block of docs/training.md runs, in order, in one namespace."""
import pathlib
import re

import curvature_standin

DOC = pathlib.Path(__file__).resolve().parents[1] / "docs" / "training.md"


def test_training_guide_blocks_run(tmp_path, monkeypatch, capsys):
    curvature_standin.install(monkeypatch)  # the real module once it has landed
    monkeypatch.chdir(tmp_path)  # the guide writes its figures to the working directory
    blocks = re.findall(r"```python\n(.*?)```", DOC.read_text(), flags=re.S)
    assert len(blocks) >= 10
    namespace = {}
    for k, code in enumerate(blocks):
        exec(compile(code, f"{DOC.name} block {k + 1}", "exec"), namespace)
    for name in ("saltmarsh_training.png", "saltmarsh_slice.png"):
        assert (tmp_path / name).stat().st_size > 5000

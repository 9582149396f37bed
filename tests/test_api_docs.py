"""Every public name is documented: a numpydoc docstring with an Examples section that runs.

The public names are those of the API reference (``docs/_ext/qgl_api.py``): ``qgradlib.__all__``,
the ``__all__`` of every stage subpackage and of every module they name. Classes and functions
need an ``Examples`` section holding at least one ``>>>`` line (tests/test_docs.py runs them);
a public module needs a docstring; data (constants, the standard gates) is described by its
module's docstring, which must then name it.
"""
import importlib.util
import inspect
import re
import types
from pathlib import Path

import pytest

EXT = Path(__file__).resolve().parent.parent / "docs" / "_ext" / "qgl_api.py"
spec = importlib.util.spec_from_file_location("qgl_api", EXT)
qgl_api = importlib.util.module_from_spec(spec)
spec.loader.exec_module(qgl_api)

MODULES = qgl_api.public_modules()
WHERE = qgl_api.canonical_names(MODULES)
OBJECTS = sorted({name: obj for mod, entries in MODULES.items() for n, obj in entries
                  if qgl_api.kind(obj) in ("class", "exception", "function")
                  for name in [WHERE[id(obj)]]}.items())
DATA = sorted((f"{mod}.{n}", mod) for mod, entries in MODULES.items() for n, obj in entries
              if qgl_api.kind(obj) == "data")


def examples_section(doc):
    """The text of the numpydoc Examples section of ``doc`` (empty when there is none)."""
    m = re.search(r"^Examples\n-{8,}\n(.*?)(?=^\w[\w ]*\n-{3,}\n|\Z)", doc, re.S | re.M)
    return m.group(1) if m else ""


def test_the_reference_covers_the_top_level_names():
    import qgradlib

    assert [n for n, _ in MODULES["qgradlib"]] == list(qgradlib.__all__)
    assert len(OBJECTS) > 40


@pytest.mark.parametrize("name,obj", OBJECTS, ids=[n for n, _ in OBJECTS])
def test_public_name_has_a_running_example(name, obj):
    doc = inspect.getdoc(obj)
    assert doc, f"{name} has no docstring"
    if inspect.isclass(obj) and obj.__doc__ is None:
        pytest.fail(f"{name} inherits its docstring; give it its own")
    section = examples_section(doc)
    assert ">>> " in section, f"{name}: the docstring needs an Examples section with a >>> example"


@pytest.mark.parametrize("module", sorted(MODULES))
def test_public_module_has_a_docstring(module):
    doc = importlib.import_module(module).__doc__
    assert doc and doc.strip(), f"{module} has no docstring"


@pytest.mark.parametrize("name,module", DATA, ids=[n for n, _ in DATA])
def test_public_data_is_named_in_its_module_docstring(name, module):
    doc = importlib.import_module(module).__doc__ or ""
    short = name.rpartition(".")[2]
    assert re.search(rf"(?<![\w.]){re.escape(short)}(?![\w])", doc), \
        f"{name} is public data: name it (and say what it holds) in the docstring of {module}"


def test_examples_section_finder():
    doc = "Sum.\n\nParameters\n----------\nx : int\n\nExamples\n--------\n>>> 1 + 1\n2\n\nNotes\n-----\nend"
    assert examples_section(doc).strip() == ">>> 1 + 1\n2"
    assert examples_section("No examples here.") == ""

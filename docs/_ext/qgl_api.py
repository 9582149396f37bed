"""The API reference, generated at build time from the public names of the package.

The public names are ``qgradlib.__all__``, the ``__all__`` of every stage subpackage, and the
``__all__`` of every module named in one of those. Each public module gets a page listing
all its names; each object is documented once, on the page of the first module (in page
order) that makes it public, and the other pages link to it. A new public name therefore
appears in the reference without anyone writing a page, and a missing docstring fails the
``-W`` build (numpydoc's GL08 check); ``tests/test_api_docs.py`` asks for Examples sections.

This module imports no Sphinx at load time, so the tests can use `public_modules` alone.
"""
from __future__ import annotations

import importlib
import inspect
import pkgutil
import types
from pathlib import Path

# the stages in the order of the data flow; a stage added later sorts after these
STAGE_ORDER = ["rules", "circuits", "engine", "evaluation", "shots", "curvature", "train",
               "landscape", "check"]


def _stages(package):
    names = [m.name for m in pkgutil.iter_modules(package.__path__) if m.ispkg]
    names.sort(key=lambda n: (STAGE_ORDER.index(n) if n in STAGE_ORDER else len(STAGE_ORDER), n))
    return [importlib.import_module(f"{package.__name__}.{n}") for n in names]


def public_modules(package_name="qgradlib"):
    """Every public module in page order, as ``{module name: [(name, object), ...]}``."""
    package = importlib.import_module(package_name)
    queue = [package] + _stages(package)
    out = {}
    while queue:
        module = queue.pop(0)
        if module.__name__ in out:
            continue
        names = getattr(module, "__all__", None)
        if names is None:
            raise ValueError(f"public module {module.__name__} has no __all__")
        entries = [(n, getattr(module, n)) for n in names]
        out[module.__name__] = entries
        queue.extend(o for _, o in entries if isinstance(o, types.ModuleType))
    return out


def canonical_names(modules):
    """``{id(object): full name}``: where each public object is documented."""
    where = {}
    for mod, entries in modules.items():
        for name, obj in entries:
            if isinstance(obj, types.ModuleType):
                where.setdefault(id(obj), obj.__name__)
            elif _documentable(obj):
                where.setdefault(id(obj), f"{mod}.{name}")
    return where


def _documentable(obj):
    """Objects that own a docstring (data such as tuples, strings and gate instances do not)."""
    return inspect.isclass(obj) or inspect.isfunction(obj) or inspect.isbuiltin(obj)


def kind(obj):
    if isinstance(obj, types.ModuleType):
        return "module"
    if inspect.isclass(obj):
        return "exception" if issubclass(obj, BaseException) else "class"
    if inspect.isfunction(obj) or inspect.isbuiltin(obj):
        return "function"
    return "data"


def _page(mod, entries, where):
    title = f"``{mod}``"
    lines = [title, "=" * len(title), "", f".. automodule:: {mod}", "   :no-members:", ""]
    here = lambda n, o: kind(o) == "data" or where[id(o)] == f"{mod}.{n}"  # noqa: E731
    table = [where[id(o)] for n, o in entries if kind(o) != "data"]
    if table:
        lines += ["Public names", "------------", "", ".. currentmodule:: None", "",
                  "Names documented on another page link there.", "",
                  ".. autosummary::", "   :nosignatures:", ""]
        lines += [f"   {t}" for t in table] + [""]
    for n, o in entries:
        if kind(o) == "module" or not here(n, o):
            continue
        full = f"{mod}.{n}"
        if kind(o) in ("class", "exception"):
            lines += [f".. autoclass:: {full}", "   :members:", "   :show-inheritance:", ""]
        elif kind(o) == "function":
            lines += [f".. autofunction:: {full}", ""]
        else:
            lines += [f".. py:data:: {full}", f"   :value: {_short_repr(o)}", "",
                      f"   {_data_doc(o)}", ""]
    return "\n".join(lines)


def _short_repr(obj):
    text = repr(obj).replace("\n", " ")
    return text if len(text) <= 70 else text[:67] + "..."


def _data_doc(obj):
    cls = type(obj)
    if cls.__module__.startswith("qgradlib"):
        return f"An instance of :py:class:`{cls.__module__.split('.')[0]}.{cls.__name__}`" \
               f" (see the module's description above)."
    return f"A constant ({cls.__name__}); the module's description above says what it holds."


def write_pages(outdir: Path, package_name="qgradlib"):
    """Write ``index.rst`` and one page per public module into ``outdir`` (changed files only)."""
    outdir.mkdir(parents=True, exist_ok=True)
    modules = public_modules(package_name)
    where = canonical_names(modules)
    pages = {f"{mod}.rst": _page(mod, entries, where) for mod, entries in modules.items()}
    index = ["API reference", "=============", "",
             "Every public module, class and function, generated from the docstrings. "
             "The examples in them run in the test suite.", "",
             ".. toctree::", "   :maxdepth: 1", ""]
    index += [f"   {mod}" for mod in modules] + [""]
    pages["index.rst"] = "\n".join(index)
    for stale in outdir.glob("*.rst"):
        if stale.name not in pages:
            stale.unlink()
    for name, text in pages.items():
        path = outdir / name
        if not path.exists() or path.read_text(encoding="utf-8") != text:
            path.write_text(text, encoding="utf-8")
    return sorted(pages)


def setup(app):
    def generate(app):
        write_pages(Path(app.srcdir) / "api")
    app.connect("builder-inited", generate)
    return {"parallel_read_safe": True, "parallel_write_safe": True}

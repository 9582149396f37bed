"""The package's layout rule: one subpackage a stage, lower stages never import higher ones,
and no import circles anywhere (walked with ``ast``, imports inside functions included)."""
import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parent.parent / "qgradlib"
# stages of the data flow, lowest first; the top-level modules sit above all of them
STAGES = ["rules", "circuits", "engine", "evaluation", "shots", "curvature", "train",
          "landscape", "check"]
TOP = len(STAGES)
# stages of the same rank (neither may import the other)
RANK = {name: i for i, name in enumerate(STAGES)}
RANK["check"] = RANK["landscape"]


def module_name(path):
    rel = path.relative_to(PKG.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def imports(path):
    """Absolute names of the qgradlib modules that ``path`` imports."""
    name = module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    out = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if not target.startswith("qgradlib"):
                continue
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                out.add(sub if (PKG.parent / sub.replace(".", "/")).with_suffix(".py").exists()
                        or (PKG.parent / sub.replace(".", "/") / "__init__.py").exists() else target)
        elif isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.startswith("qgradlib"))
    out.discard(name)
    return out


MODULES = {module_name(p): p for p in PKG.rglob("*.py")}
GRAPH = {m: {t for t in imports(p) if t in MODULES} for m, p in MODULES.items()}


def stage(module):
    parts = module.split(".")
    return parts[1] if len(parts) > 1 and parts[1] in RANK else None


def rank(module):
    s = stage(module)
    return TOP if s is None else RANK[s]


def test_every_stage_is_a_package_with_a_docstring():
    for name in STAGES:
        init = PKG / name / "__init__.py"
        if name == "landscape" and not init.exists():
            continue            # added by a later issue
        assert init.exists(), f"qgradlib/{name}/ is missing"
        assert ast.get_docstring(ast.parse(init.read_text())), f"qgradlib/{name}/__init__.py has no docstring"


def test_the_top_level_stays_small():
    top = [p.name for p in PKG.glob("*.py")]
    assert len(top) <= 10, top


@pytest.mark.parametrize("module", sorted(GRAPH))
def test_no_upward_import(module):
    # a lower stage never imports a higher one (the top-level __init__ may import all)
    if rank(module) == TOP:
        return                  # cli, demo, plot and the public names sit above every stage
    for target in GRAPH[module]:
        if stage(module) == stage(target):
            continue
        assert rank(target) < rank(module), \
            f"{module} (stage {stage(module)}) imports {target} (stage {stage(target)})"


def test_no_import_circles():
    # a subpackage's __init__ importing its own modules is not a circle of ideas
    graph = {m: {t for t in ts if not (m == t.rpartition(".")[0] and MODULES[m].name == "__init__.py")}
             for m, ts in GRAPH.items()}
    seen, stack, cycles = set(), [], []

    def visit(m):
        if m in stack:
            cycles.append(stack[stack.index(m):] + [m])
            return
        if m in seen:
            return
        seen.add(m)
        stack.append(m)
        for t in graph[m]:
            # importing a package runs its __init__: follow it
            visit(t)
        stack.pop()

    for m in sorted(graph):
        visit(m)
    assert not cycles, "import circles: " + "; ".join(" -> ".join(c) for c in cycles[:5])

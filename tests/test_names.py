"""Retired names never come back: code, docs, tests and README are scanned here, the demo's
output in tests/test_cli.py.

The names below read as one existing tool's vocabulary (see DESIGN.md); the capability stays
under our own names (`structure=`, `euler`, `noise`, `gradient="difference"`, `step=`,
`stencil=`, `rate=`, `frequencies_by_parameter`, the bench ring R6 scenario). The patterns
are built from pieces so that this file does not match itself.
"""
import re
from pathlib import Path


ROOT = Path(__file__).resolve().parent.parent
J = "".join
RETIRED = [
    J(["appr", r"ox\s*="]), J(["block", "-diag"]), J(["diag", "_settings"]),
    J(["finite", r"-diff\b"]), J(["fd", "_step"]), J(["fd", "_kind"]),
    J([r"\.ro", r"t\("]), J(["def ro", r"t\("]),
    J([r"\.depolar", r"ize\("]), J([r"\.deph", r"ase\("]), J([r"\.amplitude_da", r"mp\("]),
    J([r"\.kra", r"us\("]), J(['"depolar', 'ize"']), J(['"amplitude_da', 'mp"']), J(['"deph', 'ase"']),
    J(["[Kk]est", "rel"]), J(["step", "size"]), J(["parameter", "_frequencies"]),
]
PATTERN = re.compile("|".join(f"(?:{p})" for p in RETIRED))


def scanned_files():
    out = []
    for pattern in ("qgradlib/**/*.py", "tests/**/*.py", "docs/**/*.md", "docs/**/*.py",
                    "docs/**/*.ipynb", "benchmarks/**/*.py", "README.md", "DEVELOPERS.md"):
        out += [p for p in ROOT.glob(pattern) if p.name != Path(__file__).name]
    return sorted(set(out))


def test_no_retired_name_in_code_docs_or_tests():
    hits = []
    for path in scanned_files():
        for i, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
            # a circuit's noise channel has a .kraus attribute: only calls are retired
            if PATTERN.search(line):
                hits.append(f"{path.relative_to(ROOT)}:{i}: {line.strip()}")
    assert not hits, "retired names:\n" + "\n".join(hits[:20])


def test_the_check_finds_a_retired_name():
    # the scan must be able to fail: each retired pattern matches its own old spelling
    olds = ["appr" "ox=None", "block" "-diag", "c.ro" "t(0)", "fd" "_step=1e-3", "step" "size=0.1",
            "c.depolar" "ize(0, 0.1)", "Kest" "rel ring", "parameter" "_frequencies(c)"]
    for old in olds:
        assert PATTERN.search(old), old

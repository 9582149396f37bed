"""The results file as a Markdown table (what docs/performance.md shows)."""
from __future__ import annotations

import json
import os
import sys

__all__ = ["markdown", "write"]

_UNIT = {"ratio": "x", "states": " states", "us": " µs"}


def markdown(doc) -> str:
    m = doc["machine"]
    lines = [f"Measured by `python -m benchmarks` ({doc['mode']}, {doc['repeats']} repeats) on "
             f"{m['cpu']}, {m['nproc']} cores, numpy {m['numpy']}, Python {m['python']}, "
             f"BLAS: {m['blas_threads']}.", "",
             "| figure | target | median | spread (min – max; IQR) | met |",
             "|---|---|---|---|---|"]
    for f in doc["figures"]:
        u = _UNIT[f["unit"]]
        if f.get("skipped"):
            lines.append(f"| {f['figure']} | {f['op'].replace('<=', '≤').replace('>=', '≥')} "
                         f"{f['target']:g}{u} | skipped: {f['skipped']} | | |")
            continue
        g = ".2f" if f["unit"] == "states" else ".3g"
        lines.append(f"| {f['figure']} | {f['op'].replace('<=', '≤').replace('>=', '≥')} {f['target']:g}{u} | "
                     f"{f['median']:{g}}{u} | {f['min']:{g}} – {f['max']:{g}}; {f['q1']:{g}} – {f['q3']:{g}} | "
                     f"{'yes' if f['met'] else 'no'} |")
    return "\n".join(lines) + "\n"


def write(doc, out, table=None, table_path=None):
    """Write the results JSON to ``out`` and, with ``table_path``, the Markdown ``table``."""
    os.makedirs(os.path.dirname(os.path.abspath(out)), exist_ok=True)
    with open(out, "w") as fh:
        json.dump(doc, fh, indent=2)
    print(f"results: {out}")
    if table_path:
        with open(table_path, "w") as fh:
            fh.write(table)
        print(f"table: {table_path}")


if __name__ == "__main__":
    with open(sys.argv[1]) as fh:
        print(markdown(json.load(fh)), end="")

"""Rewrite a generated table in a docs page, between its start and end markers."""
import re


def rewrite_block(path, start: str, end: str, text: str) -> None:
    """Replace what stands between ``start`` and ``end`` in ``path`` by ``text``."""
    doc = path.read_text()
    block = re.compile(re.escape(start) + ".*?" + re.escape(end), re.S)
    if block.search(doc) is None:
        raise SystemExit(f"{path} has no {start} ... {end} block to rewrite")
    path.write_text(block.sub(lambda _: f"{start}\n{text}{end}", doc))

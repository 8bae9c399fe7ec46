"""The generated parts of docs/warehouse.md: the table of tables and the long views.

Each part sits between two marker comments; `update_doc` rewrites what lies between them from the
declarations (`serving._schema.SCHEMA`, `serving._views.VIEWS`) and leaves the rest of the file
alone. ``python -m serving [docs/warehouse.md]`` rewrites the file; tests/serving checks that the
committed file equals its regenerated self.
"""

from __future__ import annotations

from pathlib import Path

from ._schema import schema_markdown
from ._views import VIEWS

__all__ = ["DOC_PATH", "update_doc", "views_markdown", "write_doc"]

#: The documentation file, relative to a checkout's root.
DOC_PATH = Path("docs") / "warehouse.md"

_PARTS = {"schema": schema_markdown, "views": lambda: views_markdown()}


def views_markdown() -> str:
    lines = ["| view | rows |", "|---|---|"]
    lines += [f"| `{name}` | {text} |" for name, (text, _) in VIEWS.items()]
    return "\n".join(lines) + "\n"


def _markers(part: str) -> tuple[str, str]:
    return (
        f"<!-- generated:{part} begin (python -m serving rewrites this part; edit serving/) -->",
        f"<!-- generated:{part} end -->",
    )


def update_doc(text: str) -> str:
    """`text` with every generated part rewritten; a missing marker raises ValueError naming it."""
    for part, render in _PARTS.items():
        begin, end = _markers(part)
        i, j = text.find(begin), text.find(end)
        if i < 0 or j < i:
            msg = f"docs/warehouse.md lacks the markers of part {part!r}: {begin!r} … {end!r}"
            raise ValueError(msg)
        text = text[: i + len(begin)] + "\n" + render() + text[j:]
    return text


def write_doc(path: str | Path = DOC_PATH) -> bool:
    """Rewrite the generated parts of the file at `path`; True when it changed."""
    p = Path(path)
    old = p.read_text(encoding="utf-8")
    new = update_doc(old)
    if new != old:
        p.write_text(new, encoding="utf-8")
    return new != old

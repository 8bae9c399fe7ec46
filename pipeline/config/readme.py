"""Write the README's configuration tables from the declarations.

``python -m pipeline.config.readme [README.md]`` replaces the block between the two markers below
with :func:`render`; ``--check`` only reports whether the block is current (exit 1 if not). A test
runs the check, so the README and the declarations cannot drift apart.
"""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Any

from pipeline._declare import REQUIRED, Declared, iter_rows
from pipeline.config._load import SECTIONS, Section

__all__ = ["BEGIN", "END", "main", "render", "update"]

BEGIN = (
    "<!-- BEGIN config reference: written by `python -m pipeline.config.readme` from the "
    "declarations in pipeline/config and pipeline/sources/_config.py; edit those, not this block -->"
)
END = "<!-- END config reference -->"


def _default(d: Declared) -> str:
    s, value = d.setting, d.default
    if s.default_doc is not None:
        return s.default_doc
    if value is REQUIRED:
        return "required"
    if value is None:
        return "—"
    if isinstance(value, bool):
        return f"`{str(value).lower()}`"
    if isinstance(value, Path):
        return f"`{value if value.is_absolute() else './' + str(value)}`"
    if isinstance(value, tuple):
        return "`[" + ", ".join(f'"{v}"' for v in value) + "]`"
    if isinstance(value, str):
        return f"`{value}`"
    return str(value)


def _doc(d: Declared, section: Section) -> str:
    choices: Any = (section.choices or {}).get(d.name, d.setting.choices)
    text = d.setting.doc
    if "{choices}" in text:
        text = text.replace("{choices}", ", ".join(f"`{c}`" for c in choices or ()))
    return text.replace("|", "\\|")


def _table(section: Section) -> list[str]:
    fitted = section.name == "universes"
    head = f"### `{section.heading}`" + (f" ({section.note})" if section.note else "")
    lines = [head, ""]
    if fitted:
        lines += [
            "**refit**: *yes* when changing the key changes the fitted numbers, so the next run",
            "refits every window of the universe (the key enters the universe's fit hash).",
            "",
            "| key | default | refit | meaning |",
            "|---|---|---|---|",
        ]
    else:
        lines += ["| key | default | meaning |", "|---|---|---|"]
    for key, d in iter_rows(section.cls):
        owner_fit = all(
            row.setting.fit for k, row in iter_rows(section.cls) if key.startswith(k + ".")
        )
        cells = [f"`{key}`", _default(d)]
        if fitted:
            via = d.setting.fit_via
            cells.append(f"yes (via `{via}`)" if via else "yes" if d.setting.fit and owner_fit else "no")
        cells.append(_doc(d, section))
        lines.append("| " + " | ".join(cells) + " |")
    return lines


def render() -> str:
    """The generated block, markers included."""
    lines = [BEGIN, ""]
    for section in SECTIONS:
        lines += [*_table(section), ""]
    lines.append(END)
    return "\n".join(lines)


def update(text: str) -> str:
    """`text` (the README) with its generated block replaced by :func:`render`."""
    start, end = text.find(BEGIN), text.find(END)
    if start < 0 or end < start:
        msg = f"the README has no block between {BEGIN!r} and {END!r}; add the two markers where the tables go"
        raise ValueError(msg)
    return text[:start] + render() + text[end + len(END) :]


def main(argv: list[str] | None = None) -> int:
    """Rewrite (or with --check, compare) the README's configuration tables."""
    args = list(sys.argv[1:] if argv is None else argv)
    check = "--check" in args
    paths = [a for a in args if a != "--check"]
    readme = Path(paths[0]) if paths else Path(__file__).resolve().parents[2] / "README.md"
    text = readme.read_text(encoding="utf-8")
    new = update(text)
    if check:
        if new != text:
            print(f"{readme}: the configuration tables differ from the declarations; run python -m pipeline.config.readme")
            return 1
        return 0
    if new != text:
        readme.write_text(new, encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())

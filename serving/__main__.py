"""``python -m serving [PATH]``: regenerate the schema parts of docs/warehouse.md (default PATH)."""

from __future__ import annotations

import sys

from ._doc import DOC_PATH, write_doc

if __name__ == "__main__":
    target = sys.argv[1] if len(sys.argv) > 1 else DOC_PATH
    changed = write_doc(target)
    print(f"{target}: {'rewritten' if changed else 'already up to date'}")

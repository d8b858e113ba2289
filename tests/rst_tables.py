"""Read the ``list-table`` tables of the user guide's pages (docs/guide/*.rst) in tests."""

from __future__ import annotations

from pathlib import Path

GUIDE = Path(__file__).resolve().parents[1] / "docs" / "guide"


def table_rows(text: str, name: str) -> list[list[str]]:
    """The body rows of the ``list-table`` named ``name`` (its header row left out), each a
    list of its cells' text with wrapped lines joined.

    >>> text = ".. list-table:: T\\n   :name: t\\n   :header-rows: 1\\n\\n   * - a\\n     - b\\n"
    >>> table_rows(text + "   * - 1\\n     - two\\n       lines\\n\\nafter\\n", "t")
    [['1', 'two lines']]
    """
    start = text.index(f"   :name: {name}\n")
    block = text[start:].split("\n\n", 1)[1]
    rows: list[list[str]] = []
    for line in block.splitlines():
        if line and not line.startswith("   "):
            break  # the text after the table
        if line.startswith("   * - "):
            rows.append([line[7:]])
        elif line.startswith("     - "):
            rows[-1].append(line[7:])
        elif line.strip():
            rows[-1][-1] += " " + line.strip()
    return rows[1:]


def guide_table(page: str, name: str) -> list[list[str]]:
    """:func:`table_rows` of the table ``name`` on the guide page ``page`` (without .rst)."""
    return table_rows((GUIDE / f"{page}.rst").read_text(encoding="utf-8"), name)

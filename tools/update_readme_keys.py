"""Rewrite the README's key reference from the key table (powderspin/model/schema.py).

Run after adding or changing a model-file key:  python tools/update_readme_keys.py
(tests/test_schema.py fails while the README and the table disagree).
"""

from __future__ import annotations

from pathlib import Path

from powderspin.model.schema import key_reference_markdown

START, END = "<!-- key reference: start -->\n", "<!-- key reference: end -->"


def main() -> None:
    readme = Path(__file__).resolve().parent.parent / "README.md"
    text = readme.read_text(encoding="utf-8")
    a = text.index(START) + len(START)
    b = text.index(END)
    readme.write_text(text[:a] + key_reference_markdown() + text[b:], encoding="utf-8")
    print(f"updated the key reference in {readme}")


if __name__ == "__main__":
    main()

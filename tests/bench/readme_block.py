"""Replace a generated block of the README: the text between <!-- NAME --> and <!-- /NAME -->."""

import re
from pathlib import Path

README = Path(__file__).resolve().parents[2] / "README.md"


def replace_block(name: str, body: str) -> None:
    """Put ``body`` between the README's markers for ``name`` (they must exist)."""
    text = README.read_text()
    pattern = rf"(<!-- {re.escape(name)} -->\n).*?(\n?<!-- /{re.escape(name)} -->)"
    new, n = re.subn(pattern, lambda m: m.group(1) + body.rstrip() + "\n" + m.group(2).lstrip(
        "\n"), text, flags=re.S)
    if n != 1:
        raise SystemExit(f"README.md has no <!-- {name} --> block")
    README.write_text(new)

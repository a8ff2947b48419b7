"""The README's key table for `review` names every key of the default key map (and no binding is
missing from it), so the documentation cannot fall behind keymaps/default.toml."""

from __future__ import annotations

import re
import string
from pathlib import Path

from textual.keys import _character_to_key

from reviewer.tui.keymap import load_keymap

README = Path(__file__).resolve().parents[1] / "README.md"
NAMED = {"right": "→", "left": "←", "up": "↑", "down": "↓", "pagedown": "PgDn", "pageup": "PgUp",
         "home": "Home", "end": "End", "f1": "F1", "space": "space", "tab": "tab"}
CHARACTERS = {_character_to_key(c): c for c in string.printable if not c.isspace()}


def readable(key: str) -> str:
    """A Textual key name as the README writes it: `shift+→`, `ctrl+r`, `/`, `PgDn`."""
    *mods, base = key.split("+")
    base = NAMED.get(base) or CHARACTERS.get(base, base)
    return "+".join([*mods, base])


def _review_keys_table() -> str:
    text = README.read_text(encoding="utf-8")
    section = text[text.index("### `review`"):text.index("### `export`")]
    return "\n".join(line for line in section.splitlines() if line.startswith("| `"))


def test_every_key_of_the_default_map_is_in_the_readme():
    table = _review_keys_table()
    quoted = set(re.findall(r"`([^`]+)`", table))
    if "`1`…`9`" in table:  # the label keys, written as a range
        quoted |= {str(k) for k in range(1, 10)}
    missing = [(spec.id, readable(k)) for spec in load_keymap().specs for k in spec.keys
               if readable(k) not in quoted]
    assert not missing, missing
    text = README.read_text(encoding="utf-8")
    assert "`ctrl+c`" in table and "`escape` closes a dialog" in text  # keys outside the map


def test_readable_names():
    assert readable("shift+right") == "shift+→" and readable("slash") == "/"
    assert readable("question_mark") == "?" and readable("pagedown") == "PgDn"

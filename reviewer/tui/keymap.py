"""Key maps as data: TOML files of binding id -> keys, loaded with tomllib and checked.

keymaps/default.toml lists every binding (id, keys, description, footer flag) in groups. Other maps
(shipped ones by name, a file given by path, the user's keymap.toml in the config folder) change keys
by id. The app builds its Bindings from the default data and applies the rest with App.set_keymap, so
the footer and the help screen come from the same data.
"""

from __future__ import annotations

import importlib.util
import re
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path

from textual.binding import Binding
from textual.keys import Keys, _character_to_key, format_key, key_to_character

from reviewer import paths
from reviewer.errors import BadInput


def _shipped_dirs() -> tuple[Path, ...]:
    """Shipped maps: the package reviewer.keymaps (keymaps/ at the top of the checkout)."""
    found: list[Path] = []
    try:
        spec = importlib.util.find_spec("reviewer.keymaps")
    except ImportError:
        spec = None
    if spec is not None and spec.submodule_search_locations:
        found += [Path(p) for p in spec.submodule_search_locations]
    found.append(Path(__file__).resolve().parents[2] / "keymaps")
    return tuple(dict.fromkeys(found))


SHIPPED_DIRS = _shipped_dirs()
USER_FILE = "keymap.toml"
_MODIFIERS = ("ctrl", "alt", "meta", "super", "hyper", "shift")
_NAMED = {k.value for k in Keys if "+" not in k.value and not k.value.startswith("<")}
_RESERVED = {"escape": "escape is reserved for closing dialogs", "ctrl+c": "ctrl+c is reserved",
             "ctrl+q": "ctrl+q is reserved (it quits)"}
PRIORITY_IDS = {"focus_list"}  # before the screen's own tab (focus_next)
_LABEL_ID = re.compile(r"label_([1-9])")


@dataclass(frozen=True)
class KeySpec:
    """One binding: a stable id, its keys (Textual key names), what it does, where it shows."""

    id: str
    group: str
    keys: tuple[str, ...]
    description: str
    footer: str = ""  # short name in the footer; empty: not in the footer

    @property
    def action(self) -> str:
        """The app action the binding runs: the id itself, or label(k) for label_k."""
        m = _LABEL_ID.fullmatch(self.id)
        return f"label({m.group(1)})" if m else self.id

    @property
    def display(self) -> str:
        return " ".join(format_key(k) for k in self.keys)


@dataclass(frozen=True)
class KeyMap:
    specs: tuple[KeySpec, ...]
    sources: tuple[str, ...]  # files applied after the default, in order

    def by_id(self) -> dict[str, KeySpec]:
        return {s.id: s for s in self.specs}

    def overrides(self, base: tuple[KeySpec, ...] | list[KeySpec] | None = None) -> dict[str, str]:
        """{id: "key,key"} for App.set_keymap: only the bindings whose keys differ from `base`
        (Textual re-applies the key map on every key press, so a short one is cheaper)."""
        before = {s.id: s.keys for s in base} if base is not None else {}
        return {s.id: ",".join(s.keys) for s in self.specs if before.get(s.id) != s.keys}

    def groups(self) -> list[tuple[str, list[KeySpec]]]:
        out: dict[str, list[KeySpec]] = {}
        for s in self.specs:
            out.setdefault(s.group, []).append(s)
        return list(out.items())


def normalise_key(text: object, where: str) -> str:
    """One key as Textual names it ("," -> "comma", "Shift+Left" -> "shift+left"), or BadInput."""
    if not isinstance(text, str) or not text.strip():
        raise BadInput(f"{where}: a key must be a non-empty string, got {text!r}")
    raw = text.strip()
    if len(raw) == 1:
        key = "space" if raw == " " else _character_to_key(raw)
    else:
        *mods, base = raw.split("+") if not raw.endswith("++") else [*raw[:-2].split("+"), "+"]
        mods = [m.lower() for m in mods]
        if any(m not in _MODIFIERS for m in mods) or len(set(mods)) != len(mods):
            raise BadInput(f"{where}: unknown modifier in key {raw!r} (use {', '.join(_MODIFIERS)})")
        if len(base) == 1:
            base = _character_to_key(base)
        elif base.lower() in _NAMED:
            base = base.lower()
        elif key_to_character(base) is None:
            raise BadInput(f"{where}: unknown key name {raw!r}")
        order = sorted(mods, key=_MODIFIERS.index)
        key = "+".join([*order, base])
    if key in _RESERVED:
        raise BadInput(f"{where}: {_RESERVED[key]}")
    return key


def _keys(value: object, where: str) -> tuple[str, ...]:
    items = [value] if isinstance(value, str) else value
    if not isinstance(items, list) or not items:
        raise BadInput(f"{where}: keys must be a string or a non-empty list of strings")
    keys = tuple(normalise_key(k, where) for k in items)
    if len(set(keys)) != len(keys):
        raise BadInput(f"{where}: the same key is listed twice")
    return keys


def _read(path: Path) -> dict:
    try:
        with open(path, "rb") as f:
            return tomllib.load(f)
    except OSError as exc:
        raise BadInput(f"{path}: cannot read key map ({exc.strerror or exc})") from None
    except tomllib.TOMLDecodeError as exc:
        raise BadInput(f"{path}: not valid TOML ({exc})") from None
    except UnicodeDecodeError:
        raise BadInput(f"{path}: not valid TOML (not UTF-8 text)") from None


def _entries(data: dict, path: Path):
    """(group, id, value) for every binding entry; the [about] table is skipped."""
    for group, table in data.items():
        if group == "about":
            continue
        if not isinstance(table, dict):
            raise BadInput(f"{path}: '{group}' must be a table of bindings like [{group}]")
        for bid, value in table.items():
            yield group, bid, value


def parse_default(path: Path) -> list[KeySpec]:
    specs: list[KeySpec] = []
    seen: set[str] = set()
    for group, bid, value in _entries(_read(path), path):
        where = f"{path}: [{group}] {bid}"
        if not isinstance(value, dict) or "keys" not in value or "description" not in value:
            raise BadInput(f"{where}: needs {{ keys = [...], description = \"...\" }}")
        if bid in seen:
            raise BadInput(f"{where}: id used twice")
        seen.add(bid)
        footer = value.get("footer", "")
        if not isinstance(footer, str):
            raise BadInput(f"{where}: footer must be a short text (or left out)")
        specs.append(KeySpec(bid, group, _keys(value["keys"], where), str(value["description"]),
                             footer))
    if not specs:
        raise BadInput(f"{path}: no bindings found")
    return specs


def parse_overrides(path: Path, known: dict[str, KeySpec]) -> dict[str, tuple[str, ...]]:
    out: dict[str, tuple[str, ...]] = {}
    for group, bid, value in _entries(_read(path), path):
        where = f"{path}: [{group}] {bid}"
        if bid not in known:
            raise BadInput(f"{where}: unknown binding id (known ids are in keymaps/default.toml)")
        if isinstance(value, dict):
            if "keys" not in value:
                raise BadInput(f"{where}: needs keys = [...]")
            value = value["keys"]
        out[bid] = _keys(value, where)
    return out


def _check_clashes(specs: list[KeySpec], source: str) -> None:
    owner: dict[str, str] = {}
    for s in specs:
        for k in s.keys:
            if k in owner:
                raise BadInput(f"{source}: key {format_key(k)!r} is given to both "
                               f"'{owner[k]}' and '{s.id}'; rebind one of them")
            owner[k] = s.id


def find_shipped(name: str) -> Path | None:
    for folder in SHIPPED_DIRS:
        candidate = folder / f"{name}.toml"
        if candidate.is_file():
            return candidate
    return None


def shipped_names() -> list[str]:
    return sorted({p.stem for d in SHIPPED_DIRS if d.is_dir() for p in d.glob("*.toml")})


def resolve_path(name_or_path: str) -> Path:
    """A --keymap argument: a shipped map's name, a name in the config folder, or a file path."""
    path = Path(name_or_path).expanduser()
    if path.suffix == ".toml" or "/" in name_or_path or path.is_file():
        if not path.is_file():
            raise BadInput(f"{path}: key map file not found")
        return path
    user = paths.config_root() / "keymaps" / f"{name_or_path}.toml"
    if user.is_file():
        return user
    shipped = find_shipped(name_or_path)
    if shipped is None:
        raise BadInput(f"{name_or_path}: no such key map (shipped: {', '.join(shipped_names())}; "
                       "or give a path to a .toml file)")
    return shipped


def default_specs() -> list[KeySpec]:
    path = find_shipped("default")
    if path is None:
        raise BadInput(f"{SHIPPED_DIRS[0] / 'default.toml'}: the default key map is missing")
    return parse_default(path)


def load_keymap(name_or_path: str | None = None, user_file: Path | None = None) -> KeyMap:
    """Default bindings, then the user's keymap.toml, then --keymap (the command line wins)."""
    specs = default_specs()
    _check_clashes(specs, "default.toml")
    user_file = paths.config_root() / USER_FILE if user_file is None else user_file
    files = [user_file] if user_file.is_file() else []
    if name_or_path and name_or_path != "default":
        files.append(resolve_path(name_or_path))
    known = {s.id: s for s in specs}
    for path in files:
        changes = parse_overrides(path, known)
        specs = [replace(s, keys=changes.get(s.id, s.keys)) for s in specs]
        _check_clashes(specs, str(path))
    return KeyMap(tuple(specs), tuple(str(p) for p in files))


def make_bindings(specs: list[KeySpec] | tuple[KeySpec, ...]) -> list[Binding]:
    """Textual Bindings (with ids, so set_keymap can change them) for the given specs."""
    return [Binding(",".join(s.keys), s.action, s.footer or s.description, show=bool(s.footer),
                    tooltip=s.description, id=s.id, priority=s.id in PRIORITY_IDS) for s in specs]

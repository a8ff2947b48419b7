"""The label set: labels.toml in the config folder, else the default shipped in reviewer/data."""

from __future__ import annotations

import tomllib
from pathlib import Path

from reviewer import paths
from reviewer.errors import BadInput

DEFAULT_FILE = Path(__file__).resolve().parents[1] / "data" / "labels.toml"
MAX_LABELS = 9  # keys 1-9


def load_labels(path: Path | None = None) -> list[str]:
    """The labels in key order (key 1 gives the first). BadInput names the file when it is wrong."""
    if path is None:
        user = paths.config_root() / "labels.toml"
        path = user if user.is_file() else DEFAULT_FILE
    try:
        with open(path, "rb") as f:
            data = tomllib.load(f)
    except OSError as exc:
        raise BadInput(f"{path}: cannot read the label set ({exc.strerror or exc})") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise BadInput(f"{path}: not valid TOML ({exc})") from None
    labels = data.get("labels")
    if not isinstance(labels, list) or not labels:
        raise BadInput(f'{path}: needs labels = ["name", ...] (1 to {MAX_LABELS} names)')
    if len(labels) > MAX_LABELS:
        raise BadInput(f"{path}: {len(labels)} labels, at most {MAX_LABELS} (keys 1-9)")
    out = []
    for item in labels:
        if not isinstance(item, str) or not item.strip() or "\n" in item:
            raise BadInput(f"{path}: every label must be a one-line, non-empty text ({item!r})")
        out.append(item.strip())
    if len(set(out)) != len(out):
        raise BadInput(f"{path}: a label is listed twice")
    return out

"""Key maps, label sets and the go-to parser: loading, overriding, and clear errors for bad files."""

from __future__ import annotations

import numpy as np
import pytest

from reviewer.errors import BadInput
from reviewer.tui import keymap as km
from reviewer.tui.app import ReviewApp
from reviewer.tui.labels import load_labels
from reviewer.tui.screens import PAIRS, help_text, pair_keys, parse_goto

# Keys the issue text asks for, by binding id (the acceptance keys typed in tmux among them).
ISSUE_KEYS = {"next_event": "n", "prev_event": "p", "next_pending": "N", "prev_pending": "P",
              "accept": "a", "reject": "r", "label_1": "1", "label_9": "9", "mark": "m",
              "nudge_earlier": "comma", "nudge_later": "full_stop", "frame_back": "left",
              "frame_forward": "right", "back_10": "shift+left", "forward_10": "shift+right",
              "page_back": "pageup", "page_forward": "pagedown", "go_to": "g", "play": "space",
              "change_view": "t", "undo": "u", "export": "e", "help": "question_mark", "quit": "q"}


def test_default_keymap_has_the_issue_keys_and_every_action_exists():
    keys = km.load_keymap()
    by_id = keys.by_id()
    for bid, key in ISSUE_KEYS.items():
        assert key in by_id[bid].keys, bid
    for spec in keys.specs:
        assert spec.description and spec.keys
        name = spec.action.split("(")[0]
        assert callable(getattr(ReviewApp, f"action_{name}", None)), spec.id
    assert keys.sources == ()


def test_one_handed_changes_keys_by_id_and_keeps_the_rest():
    keys = km.load_keymap("one-handed").by_id()
    assert keys["next_event"].keys == ("f",)
    assert keys["accept"].keys == ("a",)  # not listed in one-handed.toml: the default stays
    assert keys["next_event"].description == km.load_keymap().by_id()["next_event"].description


def test_user_keymap_then_command_line_map(tmp_path, monkeypatch):
    monkeypatch.setenv("REVIEWER_CONFIG_DIR", str(tmp_path))
    (tmp_path / "keymap.toml").write_text('[any]\nundo = "ctrl+z"\nnext_event = ["j"]\n')
    keys = km.load_keymap().by_id()
    assert keys["undo"].keys == ("ctrl+z",) and keys["next_event"].keys == ("j",)
    keys = km.load_keymap("one-handed").by_id()  # the command line wins over the user file
    assert keys["next_event"].keys == ("f",) and keys["undo"].keys == ("s",)


def test_keymap_by_path_and_key_spelling(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_text('[v]\nzoom_in = ["Ctrl+Shift+Up", "*"]\n')
    keys = km.load_keymap(str(path))
    assert keys.by_id()["zoom_in"].keys == ("ctrl+shift+up", "asterisk")
    assert keys.sources == (str(path),)


@pytest.mark.parametrize("text, words", [
    ("[a]\nnext_event = [\n", "not valid TOML"),
    ("[a]\nnot_a_binding = \"x\"\n", "unknown binding id"),
    ("[a]\naccept = \"shift+sparkly_thing\"\n", "unknown key name"),
    ("[a]\naccept = \"hyperdrive+a\"\n", "unknown modifier"),
    ("[a]\naccept = \"escape\"\n", "reserved"),
    ("[a]\naccept = \"n\"\n", "given to both"),
    ("[a]\naccept = []\n", "non-empty list"),
    ("accept = \"a\"\n", "must be a table"),
])
def test_malformed_keymap_is_one_clear_line(tmp_path, text, words):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(BadInput) as err:
        km.load_keymap(str(path))
    message = str(err.value)
    assert str(path) in message and words in message and "\n" not in message


def test_unknown_keymap_name_lists_the_shipped_ones():
    with pytest.raises(BadInput, match="one-handed"):
        km.load_keymap("no-such-map")


def test_help_text_comes_from_the_data():
    keys = km.load_keymap()
    text = help_text(keys, ["alpha", "beta"]).plain
    by_id = keys.by_id()
    seconds = {other: (first, desc) for first, (other, desc) in PAIRS.items()}
    for spec in keys.specs:
        if spec.id in PAIRS:  # shown on one row with its partner
            other, desc = PAIRS[spec.id]
            assert f"{pair_keys(spec.display, by_id[other].display)}  " in text and desc in text
        elif spec.id in seconds:
            assert seconds[spec.id][1] in text, spec.id
        else:
            assert spec.display in text or spec.id.startswith("label_"), spec.id  # labels: "1…9"
    assert "label and accept: 1 alpha, 2 beta\n" in text  # keys 3-9 give no label here
    assert "1…9" in text


def test_labels_default_and_user_file(tmp_path, monkeypatch):
    labels = load_labels()
    assert labels[:4] == ["layer", "nucleation", "coalescence", "dissolution"]
    assert "artefact" in labels and len(labels) <= 9
    monkeypatch.setenv("REVIEWER_CONFIG_DIR", str(tmp_path))
    (tmp_path / "labels.toml").write_text('labels = ["edge", "island"]\n')
    assert load_labels() == ["edge", "island"]
    (tmp_path / "labels.toml").write_text(f"labels = {[str(i) for i in range(10)]}\n")
    with pytest.raises(BadInput, match="at most 9"):
        load_labels()


@pytest.mark.parametrize("text, expected", [
    ("1234", 1234), (" 0 ", 0), ("3.5s", 1400), ("3.5 s", 1400), ("0:01.25", 500), (".5s", 200),
    ("0:00:01.25", 500), ("0:00:05", 2000), ("0:00:12.4", 4960)])
def test_go_to_parses_frames_and_times_at_400_fps(text, expected):
    # 400 frames/s: frame = seconds x 400 (common practice, no source)
    assert parse_goto(text, 5000, None, 400.0) == expected


def test_go_to_takes_hours_minutes_seconds_on_a_long_movie():
    from reviewer.tui.screens import parse_seconds

    assert parse_seconds("1:02:03.5") == 3723.5  # 1 h 2 min 3.5 s
    assert parse_seconds("62:03.5") == 3723.5  # minutes may pass 60 without hours
    assert parse_seconds("1234") is None  # a frame number
    assert parse_goto("1:02:03.5", 40_000, None, 10.0) == 37_235  # 3723.5 s x 10 frames/s


def test_go_to_uses_per_frame_times_and_rejects_bad_input():
    times = np.array([0.0, 0.1, 0.25, 0.5, 1.0])
    assert parse_goto("0.3s", 5, times, None) == 2  # nearest recorded time (0.25 s)
    for bad in ("", "abc", "12x", "5", "-1", "2s", "0:0:60", "0:60:00", "1:2:3:4"):
        with pytest.raises(ValueError):
            parse_goto(bad, 5, times, None)
    with pytest.raises(ValueError, match="no timing"):
        parse_goto("1s", 5, None, None)

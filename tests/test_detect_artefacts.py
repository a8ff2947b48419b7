"""Whole-field artefacts told apart from local change, and one candidate per change (generated
movies with known events)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from reviewer.detect import CANDIDATE_COLUMNS, scan_movie
from reviewer.movie import ArrayMovie


def _scene(rng, size, big=256):
    base = ndimage.gaussian_filter(rng.standard_normal((big, big)), 4.0)
    return np.clip(1.0 + 0.3 * base / base.std(), 0.1, None)


def test_cause_is_the_last_candidate_column():
    assert CANDIDATE_COLUMNS[-1] == "cause"


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_stage_jump_is_one_global_candidate_of_cause_stage(seed):
    rng = np.random.default_rng(seed)
    sc = _scene(rng, 128)
    lam = np.empty((400, 128, 128))
    lam[:250] = 30 * sc[20:148, 20:148]
    lam[250:] = 30 * sc[25:153, 20:148]        # the stage jumps 5 px at frame 250
    lam[100:, 60:72, 60:72] *= 0.6             # and an island appears at frame 100
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    g = c[c["kind"] == "global"]
    assert len(g) == 1 and abs(int(g.iloc[0]["frame"]) - 250) <= 1, c
    assert g.iloc[0]["cause"] == "stage", c
    local = c[c["kind"] != "global"]
    assert list(local["frame"]) == [100], c  # nothing local near the jump
    assert set(local["cause"]) == {""}


def test_blank_and_beam_step_have_their_causes():
    rng = np.random.default_rng(1)
    lam = np.full((600, 48, 48), 40.0)
    lam[300] *= 0.004          # blanked frame
    lam[450:] *= 1.15          # beam-current step
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert list(zip(c["frame"], c["kind"], c["cause"], strict=True)) == [
        (300, "global", "blank"), (450, "global", "beam")], c


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_a_local_change_that_moves_the_mean_is_local(seed):
    rng = np.random.default_rng(seed)
    lam = np.full((400, 64, 64), 30.0)
    lam[200:, 20:36, 20:36] *= 0.5  # 256 px at half contrast: the frame mean drops 3 %
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert not (c["kind"] == "global").any(), c
    at = c[(c["frame"] - 200).abs() <= 3]
    assert list(zip(at["frame"], at["kind"], strict=True)) == [(200, "step")], c
    assert abs(at.iloc[0]["x"] - 28) <= 6 and abs(at.iloc[0]["y"] - 28) <= 6


@pytest.mark.parametrize("seed", range(6))
def test_one_lasting_change_near_the_end_gives_one_candidate(seed):
    rng = np.random.default_rng(seed)
    lam = np.full((200, 64, 64), 30.0)
    lam[178:, 30:40, 12:22] *= 0.6
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    at = c[(c["frame"] - 178).abs() <= 3]  # (a rare false alarm elsewhere is by design)
    assert len(at) == 1 and at.iloc[0]["frame"] == 178 and at.iloc[0]["kind"] == "step", c


@pytest.mark.parametrize("seed", range(5))
def test_a_particle_seen_three_frames_is_one_transient_with_its_span(seed):
    rng = np.random.default_rng(seed)
    lam = np.full((400, 64, 64), 30.0)
    lam[200:203, 28:36, 28:36] *= 0.5  # half contrast, three frames
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    c = c[(c["frame"] - 200).abs() <= 8]  # (a rare false alarm elsewhere is by design)
    assert len(c) == 1, c
    row = c.iloc[0]
    assert row["kind"] == "transient" and row["frame"] == 200, c
    assert 201 <= int(row["frame_end"]) <= 203, c


def test_no_false_transients_after_a_stage_jump_on_a_real_image():
    # scikit-image's bundled camera photograph (skimage.data, no download) as the specimen: a jump
    # moves bright and dark areas across tiles, which must not read as particles afterwards
    data = pytest.importorskip("skimage.data")
    transform = pytest.importorskip("skimage.transform")
    view = transform.resize(data.camera().astype(float), (160, 160), anti_aliasing=True)
    view = np.clip(view / view.mean(), 0.05, None)
    rng = np.random.default_rng(4)
    lam = np.empty((900, 128, 128))
    lam[:300] = 60 * view[16:144, 16:144]
    lam[300:] = 60 * view[21:149, 16:144]   # 5 px stage jump at frame 300
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert list(zip(c["frame"], c["kind"], c["cause"], strict=True)) == [(300, "global", "stage")], c

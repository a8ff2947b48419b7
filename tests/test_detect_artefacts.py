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


# (16 px at 50 % contrast, 24 px at 40 %) with seeds: 16x16 px moves the frame mean by 3 %; 24x24
# px touches 16 of the 64 tiles of 8 px (the share of tiles that once made a change global) and
# moves the mean by 5.6 %, but one common factor over all tiles explains little of either: not a
# beam-current change, and all of it lies at one place: not a change of the whole field
@pytest.mark.parametrize(("side", "factor", "seed"),
                         [(16, 0.5, s) for s in range(4)] + [(24, 0.6, s) for s in range(6)])
def test_a_local_change_that_moves_the_mean_is_local(side, factor, seed):
    rng = np.random.default_rng(seed)
    lam = np.full((400, 64, 64), 30.0)
    lam[200:, 20: 20 + side, 20: 20 + side] *= factor
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert not (c["kind"] == "global").any(), c
    at = c[(c["frame"] - 200).abs() <= 3]
    assert list(zip(at["frame"], at["kind"], strict=True)) == [(200, "step")], c
    centre = 20 + side / 2
    assert abs(at.iloc[0]["x"] - centre) <= side / 3 and abs(at.iloc[0]["y"] - centre) <= side / 3


@pytest.mark.parametrize("seed", range(3))
def test_a_ten_percent_beam_step_on_a_textured_scene_is_global_beam(seed):
    # every tile scales by the same factor, however bright it is: one common factor explains it
    rng = np.random.default_rng(seed)
    lam = np.repeat(30 * _scene(rng, 64)[None, :64, :64], 400, axis=0)
    lam[250:] *= 1.10
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert list(zip(c["frame"], c["kind"], c["cause"], strict=True)) == [
        (250, "global", "beam")], c


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


def _moon_view():
    # scikit-image's bundled lunar-surface image (skimage.data.moon, no download): little texture at
    # the scale of an 8 px tile, the hard case for a whole-field shift measured on tile sums
    data = pytest.importorskip("skimage.data")
    transform = pytest.importorskip("skimage.transform")
    view = transform.resize(data.moon().astype(float), (160, 160), anti_aliasing=True)
    return np.clip(view / view.mean(), 0.05, None)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_stage_jump_on_a_low_texture_image_at_a_low_dose_is_a_stage_jump(seed):
    view = _moon_view()
    rng = np.random.default_rng(seed)
    lam = np.empty((400, 128, 128))
    lam[:250] = 5 * view[16:144, 16:144]     # 5 counts/px
    lam[250:] = 5 * view[21:149, 16:144]     # the stage jumps 5 px at frame 250
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert list(zip(c["frame"], c["kind"], c["cause"], strict=True)) == [(250, "global", "stage")], c


@pytest.mark.parametrize("dose", [20, 100])
def test_the_field_shift_on_tile_sums_agrees_with_phase_cross_correlation(dose):
    # reference: skimage.registration.phase_cross_correlation on the full-resolution frames (no
    # phase normalisation, which fails under shot noise; it returns minus the applied shift)
    registration = pytest.importorskip("skimage.registration")
    from reviewer.detect.drift import bin_image, explained_shift, fit_shift

    view = _moon_view()
    rng = np.random.default_rng(7)
    before = rng.poisson(dose * np.repeat(view[None, 16:144, 16:144], 3, axis=0)).mean(axis=0)
    after = rng.poisson(dose * np.repeat(view[None, 21:149, 16:144], 3, axis=0)).mean(axis=0)
    ref, _, _ = registration.phase_cross_correlation(before, after, upsample_factor=20,
                                                      normalization=None)
    a, b = bin_image(before, 8), bin_image(after, 8)
    noise = (a + b) / 3  # Poisson: var of a tile sum = its mean; means of 3 frames, two images
    d, _, _, _ = fit_shift(a, b, 1.0 / noise)
    # on 8 px tile sums of this image the fit scatters by about 1 px (measured over seeds 7-11 at
    # 20 and 100 counts/px: at most 1.05 px off); the plain correlation said 3.2 px here
    assert np.hypot(*(8 * d + ref)) <= 1.25, (8 * d, ref)   # the same shift as the reference
    assert np.hypot(*(8 * d - [-5.0, 0.0])) <= 1.25, 8 * d  # and the true one
    size, share = explained_shift(a, b, noise=noise)
    assert abs(8 * size - 5.0) <= 1.0 and share >= 0.5, (size, share)


def test_a_local_change_on_a_low_texture_image_is_not_a_field_shift():
    view = _moon_view()
    rng = np.random.default_rng(3)
    lam = np.repeat(20 * view[None, 16:144, 16:144], 300, axis=0)
    yy, xx = np.mgrid[:128, :128]
    lam[150:, (yy - 60) ** 2 + (xx - 70) ** 2 <= 36] *= 0.6  # an island forms at frame 150
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    assert list(zip(c["frame"], c["kind"], strict=True)) == [(150, "step")], c


def _particle(seed: int, contrast: float):
    rng = np.random.default_rng(seed)
    lam = np.full((400, 64, 64), 30.0)
    lam[200:203, 28:36, 28:36] *= 1 - contrast  # a particle over 8x8 px for frames 200-202
    c = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16))).candidates
    return c[(c["frame"] - 200).abs() <= 8]  # (a rare false alarm elsewhere is by design)


def _one_transient_with_its_span(c) -> bool:
    return (len(c) == 1 and c.iloc[0]["kind"] == "transient" and c.iloc[0]["frame"] == 200
            and 201 <= int(c.iloc[0]["frame_end"]) <= 203)


@pytest.mark.parametrize(("seed", "contrast"), [(306, 0.3), (310, 0.4), (337, 0.5)])
def test_a_long_windows_echo_before_a_particle_is_not_its_entry(seed, contrast):
    # cases of the 40-seed sweep below where the 10-frame window's response, which peaks a few
    # frames before a 3-frame particle, was paired with its exit (a transient from frame 196-198),
    # or left the particle itself as a second transient
    c = _particle(seed, contrast)
    assert _one_transient_with_its_span(c), c


@pytest.mark.heavy
@pytest.mark.parametrize("contrast", [0.3, 0.4, 0.5])
def test_three_frame_particles_are_one_transient_with_their_span(contrast):
    right = sum(_one_transient_with_its_span(_particle(300 + seed, contrast)) for seed in range(40))
    assert right >= 39, right  # measured 40/40 at each contrast (38, 39, 39 before the fix)


@pytest.mark.parametrize("seed", [301, 304, 326, 334])
def test_a_faint_particle_with_one_edge_seen_is_a_transient_not_a_step(seed):
    # 20 % contrast: only the entry or only the exit stood out of the noise, and it was reported
    # as a lasting step (at the particle's leaving frame for 301, 326, 334); the longest window
    # shows no lasting change there, so it is one transient from the other edge to this one
    c = _particle(seed, 0.2)
    assert _one_transient_with_its_span(c), c


def test_the_common_factor_share_agrees_with_a_least_squares_fit():
    # reference: numpy.linalg.lstsq for the one-parameter weighted fit after − before ≈ g·before
    from reviewer.detect.drift import change_beyond, explained_factor

    rng = np.random.default_rng(5)
    before = 1920 * _scene(rng, 16)[:8, :8]
    noise = 2 * before / 3
    for after in (before * 1.1 + rng.normal(0, np.sqrt(noise)),          # a beam step
                  before + np.where(np.arange(64).reshape(8, 8) % 8 < 2, 400.0, 0.0)):  # a band
        sw = 1 / np.sqrt(noise.ravel())
        d = (after - before).ravel()
        g = np.linalg.lstsq((before.ravel() * sw)[:, None], d * sw, rcond=None)[0][0]
        e0, e1 = np.sum((d * sw) ** 2), np.sum(((d - g * before.ravel()) * sw) ** 2)
        assert explained_factor(before, after, noise) == pytest.approx((e0 - e1) / (e0 - 64))
    yy, xx = np.mgrid[:8, :8]
    island = before * np.where((yy - 4) ** 2 + (xx - 4) ** 2 <= 2, 0.6, 1.0)
    assert change_beyond(before, island, noise) < 0.05  # one place: nothing beyond it
    assert explained_factor(before, before * 1.1, noise) == pytest.approx(1.0)

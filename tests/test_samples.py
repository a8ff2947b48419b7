"""The synthetic movie generator: determinism, chunking, ground truth, and the physics it claims
(Poisson shot noise at the set dose, local layer steps, blanked frames, stage jumps), checked
against scipy, scikit-image and tifffile."""

from __future__ import annotations

import os
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest
import tifffile
from scipy import stats

from sample_movies import growth
from sample_movies.growth import PRESETS, Scenario, generate, iter_generate, plan, write_movie

QUIET = dict(drift_px_per_frame=0.0, drift_wander_px=0.0, beam_wander=0.0)
SMALL = replace(PRESETS["low_dose"], n_frames=700, height=64, width=80, mean_wait=80.0,
                transients_per_10k=60.0, blanks_per_10k=40.0, stage_jumps_per_10k=15.0,
                nucleations_per_10k=30.0, dissolutions_per_10k=15.0, beam_steps_per_10k=15.0)
KINDS = {"step": {"layer", "nucleation", "dissolution"}, "transient": {"particle"},
         "global": {"blank", "beam_step", "stage_jump"}}


def test_same_seed_same_bytes_other_seed_differs():
    a, ta = generate(SMALL, seed=3)
    b, tb = generate(SMALL, seed=3)
    c, _ = generate(SMALL, seed=4)
    assert a.dtype == np.uint16 and a.shape == (700, 64, 80)
    assert a.tobytes() == b.tobytes()
    pd.testing.assert_frame_equal(ta, tb)
    assert a.tobytes() != c.tobytes()


@pytest.mark.parametrize("chunk", [1, 64, 200])
def test_iter_generate_reproduces_generate(chunk):
    movie, _ = generate(SMALL, seed=5)
    starts = []
    out = np.zeros_like(movie)
    for start, block in iter_generate(SMALL, seed=5, chunk=chunk):
        starts.append(start)
        assert block.dtype == np.uint16 and len(block) <= max(chunk, 64) + 63
        out[start:start + len(block)] = block
    assert starts == sorted(starts) and starts[0] == 0
    assert np.array_equal(out, movie)


def test_truth_is_sane_and_has_every_ingredient():
    movie, truth = generate(SMALL, seed=7)
    n, h, w = movie.shape
    assert list(truth.columns) == ["frame", "frame_end", "kind", "what", "x", "y"]
    assert truth["frame"].is_monotonic_increasing
    assert truth["frame"].between(0, n - 1).all()
    for kind, what in zip(truth["kind"], truth["what"], strict=True):
        assert what in KINDS[kind]
    assert set(truth["what"]) == set().union(*KINDS.values())
    local = truth[truth["kind"] != "global"]
    assert local["x"].between(0, w).all() and local["y"].between(0, h).all()
    assert truth.loc[truth["kind"] == "global", ["x", "y"]].isna().all().all()
    spans = truth[truth["what"].isin(["particle", "blank"])]
    assert (spans["frame_end"] >= spans["frame"]).all()
    # growth fronts produce a steady series of layers
    layers = truth[truth["what"] == "layer"]
    assert len(layers) >= 6


def test_quiet_presets_have_no_events_and_each_preset_generates():
    for name in ("idle", "step_flow"):
        assert len(plan(PRESETS[name], 1).truth) == 0
    for name, sc in PRESETS.items():
        movie, truth = generate(replace(sc, n_frames=80), seed=1)
        assert movie.shape == (80, sc.height, sc.width), name


def _flat(**kw) -> Scenario:
    return Scenario(n_frames=kw.pop("n_frames", 400), height=48, width=48, n_fronts=0,
                    texture_contrast=0.0, **kw)


def test_noise_is_poisson_at_the_set_dose():
    dose = 40.0
    movie, truth = generate(_flat(dose=dose), seed=11)
    assert len(truth) == 0
    x = movie.astype(np.float64)
    n, p = x.shape[0], x.shape[1] * x.shape[2]
    # Mean counts equal the dose: the grand mean of n*p Poisson(dose) counts has standard error
    # sqrt(dose / (n p)); allow 4 standard errors.
    assert abs(x.mean() - dose) < 4 * np.sqrt(dose / (n * p))
    # Variance equals the mean (Poisson): sum of squared deviations from each pixel's mean, over the
    # true variance, follows chi-square with p(n-1) degrees of freedom (scipy.stats.chi2; Gaussian
    # limit, the Poisson excess kurtosis 1/dose widens it by ~1 %, covered by the 99.9 % interval).
    ss = ((x - x.mean(axis=0)) ** 2).sum() / dose
    df = p * (n - 1)
    lo, hi = stats.chi2.ppf([0.0005, 0.9995], df)
    assert lo < ss < hi


def test_counts_follow_the_poisson_distribution_at_low_dose():
    dose = 3.0
    movie, _ = generate(_flat(dose=dose, n_frames=200), seed=12)
    counts = np.bincount(movie.ravel().astype(np.int64))
    k = np.arange(9)
    expected = stats.poisson.pmf(k, dose) * movie.size  # scipy.stats.poisson
    observed = np.append(counts[:8], counts[8:].sum())
    expected[-1] = stats.poisson.sf(7, dose) * movie.size
    _, pvalue = stats.chisquare(observed, expected)  # scipy.stats.chisquare goodness of fit
    assert pvalue > 1e-3


def _one_front(**kw) -> Scenario:
    return Scenario(n_frames=kw.pop("n_frames", 600), height=96, width=96, dose=200.0,
                    n_fronts=1, step_px=1.5, mean_wait=150.0, min_wait=60, **kw)


def test_layer_event_changes_the_mean_only_locally_and_only_from_its_frame():
    movie, truth = generate(_one_front(), seed=21)
    ev = truth.iloc[1]  # a layer with a quiet stretch on both sides (min_wait 60)
    f, x, y = int(ev["frame"]), ev["x"], ev["y"]
    assert ev["what"] == "layer"
    m = movie.astype(np.float64)
    k = 25
    before, after = m[f - k:f].mean(axis=0), m[f:f + k].mean(axis=0)
    earlier = m[f - 2 * k:f - k].mean(axis=0)
    yy, xx = np.mgrid[0:96, 0:96]
    near = (np.abs(yy - y) < 5) & (np.abs(xx - x) < 30)
    far = np.hypot(yy - y, xx - x) > 35
    se = np.sqrt(2 * 200.0 / k)  # per-pixel standard error of a difference of two k-frame means
    change = after - before
    # the platelet covers membrane: the region darkens, many sigma; far away nothing changes
    assert change[near].sum() / (se * np.sqrt(near.sum())) < -10
    assert abs(change[far].mean()) < 4 * se / np.sqrt(far.sum())
    assert (np.abs(change[far]) > 5 * se).mean() < 0.001
    # nothing happened in the region before the event's frame
    quiet = before - earlier
    assert abs(quiet[near].sum() / (se * np.sqrt(near.sum()))) < 4
    # the change is there on frame f itself, not on frame f-1
    d_on = (m[f] - before)[near].sum() / np.sqrt(200.0 * near.sum())
    d_prev = (m[f - 1] - m[f - k:f - 1].mean(axis=0))[near].sum() / np.sqrt(200.0 * near.sum())
    assert d_on < -5 and abs(d_prev) < 4.5


def test_blanked_frame_is_near_zero():
    sc = _flat(dose=40.0, n_frames=300, blanks_per_10k=100.0)
    movie, truth = generate(sc, seed=31)
    blanks = truth[truth["what"] == "blank"]
    assert len(blanks) == 3
    for f in blanks["frame"]:
        assert movie[f].mean() < 0.01 * 40.0
        assert movie[f - 1].mean() > 0.9 * 40.0


def test_stage_jump_shifts_the_field_by_the_stated_amount():
    from skimage.registration import phase_cross_correlation

    sc = replace(_one_front(layer_events=False, n_frames=200), stage_jumps_per_10k=50.0,
                 jump_px=6.0, texture_contrast=0.2)
    movie, truth = generate(sc, seed=41)
    jumps = truth[truth["what"] == "stage_jump"]
    assert len(jumps) == 1 and jumps.iloc[0]["kind"] == "global"
    f = int(jumps.iloc[0]["frame"])
    ref = movie[f - 30:f].mean(axis=0)
    moved = movie[f:f + 30].mean(axis=0)
    # skimage.registration.phase_cross_correlation returns the shift that registers `moving` onto
    # the reference, i.e. minus the shift applied to the image content.
    found, _, _ = phase_cross_correlation(ref, moved, upsample_factor=10, normalization=None)
    assert np.hypot(*found) == pytest.approx(6.0, abs=0.25)
    # content moves opposite to the view's offset on the specimen, so the registration shift
    # equals the change of offset
    offsets = plan(sc, 41).offsets
    assert np.allclose(found, offsets[f] - offsets[f - 1], atol=0.25)


def test_written_movie_reads_back_with_tifffile(tmp_path):
    sc = replace(SMALL, n_frames=150)
    movie, truth = generate(sc, seed=51)
    path = tmp_path / "m.tif"
    written = write_movie(path, sc, seed=51, fps=400.0)
    pd.testing.assert_frame_equal(written, truth)
    assert np.array_equal(tifffile.imread(path), movie)  # tifffile, the reference TIFF reader
    with tifffile.TiffFile(path) as tf:
        assert tf.is_imagej
        assert tf.imagej_metadata["finterval"] == pytest.approx(1 / 400.0)
        assert tf.series[0].dataoffset is not None  # one contiguous stack
    back = pd.read_csv(path.with_name("m.tif.truth.csv"))
    assert np.array_equal(back["frame"].to_numpy(), truth["frame"].to_numpy())
    # compressed 8-bit variant (what the demo sample uses)
    small = tmp_path / "z.tif"
    write_movie(small, replace(sc, dose=12.0), seed=51, fps=250.0, compression="zlib",
                dtype="uint8")
    with tifffile.TiffFile(small) as tf:
        assert tf.imagej_metadata["finterval"] == pytest.approx(1 / 250.0)
        assert np.array_equal(tf.asarray(), generate(replace(sc, dose=12.0), 51)[0])


def test_ensure_sample_generates_once_and_reuses(monkeypatch):
    monkeypatch.setitem(growth.PRESETS, "sample", replace(PRESETS["sample"], n_frames=120))
    path = growth.ensure_sample()
    assert path.is_file() and path.suffix == ".tif"
    assert os.environ["REVIEWER_CACHE_DIR"] in str(path)
    stamp = path.stat().st_mtime_ns
    assert growth.ensure_sample() == path
    assert path.stat().st_mtime_ns == stamp


@pytest.mark.heavy
def test_bundled_sample_is_small_and_complete():
    path = growth.ensure_sample()
    assert path.stat().st_size <= 20e6
    with tifffile.TiffFile(path) as tf:
        assert tf.series[0].shape == (2000, 96, 128)
        assert tf.imagej_metadata["finterval"] == pytest.approx(1 / 400.0)
    truth = pd.read_csv(growth.truth_path(path))
    whats = truth["what"].value_counts()
    assert 15 <= whats["layer"] <= 30 and whats["blank"] == 2 and whats["stage_jump"] == 1
    assert whats["particle"] >= 1 and whats["nucleation"] >= 1


def test_bundled_sample_plan_and_size_fast(tmp_path):
    # the CI version of the check above: the sample's ground truth comes from its plan (no frames
    # drawn), its file size is extrapolated from its first 256 frames written the same way
    sc = PRESETS["sample"]
    assert (sc.n_frames, sc.height, sc.width, sc.fps) == (2000, 96, 128, 400.0)
    whats = plan(sc, growth.SAMPLE_SEED).truth["what"].value_counts()
    assert 15 <= whats["layer"] <= 30 and whats["blank"] == 2 and whats["stage_jump"] == 1
    assert whats["particle"] >= 1 and whats["nucleation"] >= 1
    head = tmp_path / "head.tif"
    write_movie(head, replace(sc, n_frames=256), growth.SAMPLE_SEED, fps=sc.fps,
                compression="zlib", dtype="uint8")  # as ensure_sample writes it
    with tifffile.TiffFile(head) as tf:
        assert tf.series[0].shape == (256, 96, 128) and tf.series[0].dtype == np.uint8
        assert tf.imagej_metadata["finterval"] == pytest.approx(1 / 400.0)
    # 20 MB for the whole sample (the demo's budget), 10 % kept spare: later frames differ
    assert head.stat().st_size * sc.n_frames / 256 <= 0.9 * 20e6

"""Detection checked against outside references (ruptures, scikit-image, the normal distribution)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage, stats

from reviewer.detect import DetectSettings, propose, scan_movie
from reviewer.detect.candidates import _peaks
from reviewer.detect.drift import TRIM, phase_shift, trimmed_noise_floor
from reviewer.detect.scoring import onset_shift
from reviewer.detect.statistics import step_z, threshold_z
from reviewer.movie import ArrayMovie, Timing


def test_threshold_matches_normal_quantile():
    # z* = Φ⁻¹(1 − α/2N), against scipy.stats.norm (reference implementation) and against the
    # rational approximation of Abramowitz & Stegun (1964), formula 26.2.23 (Hastings; absolute
    # error < 4.5e-4; constants from memory), computed here
    for n in (10**4, 10**5, 10**6):
        assert threshold_z(0.05, n) == pytest.approx(stats.norm.isf(0.05 / (2 * n)), rel=1e-9)
        t = np.sqrt(-2 * np.log(0.05 / (2 * n)))
        hastings = t - (2.515517 + 0.802853 * t + 0.010328 * t**2) / (
            1 + 1.432788 * t + 0.189269 * t**2 + 0.001308 * t**3)
        assert threshold_z(0.05, n) == pytest.approx(hastings, abs=5e-4)
    assert threshold_z(0.05, 10**6) == pytest.approx(5.45, abs=0.01)


def test_step_statistic_finds_the_change_points_ruptures_finds():
    rpt = pytest.importorskip("ruptures")
    rng = np.random.default_rng(3)
    levels = [0.0, 3.0, 0.5, 4.0, 1.0]
    bkps = [120, 250, 390, 520]
    sig = np.concatenate([np.full(b - a, lv) for a, b, lv in
                          zip([0, *bkps], [*bkps, 650], levels, strict=True)])
    sig = sig + rng.standard_normal(sig.size)
    n = sig.size
    # reference: ruptures KernelCPD, linear kernel (= Pelt with l2 cost), jump=1, BIC-like penalty
    # 2σ² ln n for a mean change (Killick, Fearnhead & Eckley 2012), σ = 1
    ref = rpt.KernelCPD(kernel="linear", min_size=2, jump=1).fit(sig).predict(pen=2 * np.log(n))
    ref = ref[:-1]  # ruptures ends the list with n
    z = np.abs(np.nan_to_num(step_z(sig, 10, sigma=1.0, outer=0)))
    ours = _peaks(z, z > threshold_z(0.05, n), radius=10)
    assert len(ours) == len(ref) == len(bkps)
    for a, b in zip(ours, ref, strict=True):
        assert abs(a - b) <= 1


def test_onset_split_is_the_single_change_point_ruptures_finds():
    rpt = pytest.importorskip("ruptures")
    rng = np.random.default_rng(21)
    for true_k, height in [(17, 2.0), (30, -1.5), (9, 0.8), (41, 3.0)]:
        sig = rng.standard_normal(49) + np.where(np.arange(49) >= true_k, height, 0.0)
        # reference: ruptures Dynp (exact search) with the l2 cost, one change point, jump=1
        ref = rpt.Dynp(model="l2", min_size=1, jump=1).fit(sig).predict(n_bkps=1)[0]
        xn = sig.astype(np.float32)[:, None, None]
        ours = 24 + onset_shift(xn, 24, (1, 1), 0, 0, 1 if height > 0 else -1, 24)
        assert ours == ref, (true_k, ours, ref)


def _texture(shape, rng, counts=60.0):
    base = ndimage.gaussian_filter(rng.standard_normal(shape), 3.0)
    return counts * (1.0 + 0.4 * base / base.std())


def test_trimmed_noise_floor_closed_form_matches_scipy_chi2():
    # E[X; X < q] / TRIM for X ~ χ²₁, q its TRIM quantile: scipy.stats.chi2 (x·f₁ = f₃), and a
    # Monte Carlo mean of the smallest TRIM share of squared normal draws
    assert trimmed_noise_floor() == pytest.approx(
        stats.chi2.cdf(stats.chi2.ppf(TRIM, 1), 3) / TRIM, rel=1e-12)
    z2 = np.sort(np.random.default_rng(3).standard_normal(1_000_000) ** 2)
    assert trimmed_noise_floor() == pytest.approx(z2[: int(TRIM * len(z2))].mean(), rel=5e-3)


def test_drift_agrees_with_skimage_phase_cross_correlation():
    registration = pytest.importorskip("skimage.registration")
    rng = np.random.default_rng(7)
    img = _texture((96, 96), rng)
    for shift in [(2.3, -1.7), (-0.4, 0.65), (5.0, 3.25)]:
        moved = np.fft.ifftn(ndimage.fourier_shift(np.fft.fftn(img), shift)).real
        ref = rng.poisson(np.clip(img, 0, None)).astype(float)
        mov = rng.poisson(np.clip(moved, 0, None)).astype(float)
        # reference: scikit-image, normalization=None (robust under shot noise); it returns the
        # shift that registers mov onto ref, i.e. minus the applied shift
        sk, _, _ = registration.phase_cross_correlation(ref, mov, upsample_factor=100,
                                                        normalization=None)
        dy, dx, _ = phase_shift(ref, mov, upsample=100, blur=0.0)
        assert abs(dy + sk[0]) <= 0.1 and abs(dx + sk[1]) <= 0.1
        assert abs(dy - shift[0]) < 0.3 and abs(dx - shift[1]) < 0.3


def test_false_alarm_rate_on_pure_poisson_noise_matches_the_design_rate():
    # per frame, P(score > z*) = α/N by construction, so N frames give α exceedances on average;
    # α is set large (40) so a short movie has enough alarms to count
    rng = np.random.default_rng(11)
    n = 6000
    movie = rng.poisson(40.0, size=(n, 32, 32)).astype(np.uint16)
    res = scan_movie(ArrayMovie(movie, timing=Timing(fps=400.0)), DetectSettings())
    alpha = 40.0
    count = int(np.sum(res.features["score"] > threshold_z(alpha, n)))
    assert alpha / 2 <= count <= alpha * 2, count
    # the short-pulse statistic has its own calibration (effective tests measured on simulated
    # Gaussian noise): the same design rate must hold on Poisson counts
    count = int(np.sum(res.features["pulse"] > threshold_z(alpha, n)))
    assert alpha / 2 <= count <= alpha * 2, count


def _platelet_movie(n=400, event=200, dose=40.0, seed=5):
    """A dark platelet whose top edge advances one pixel row over 40 px at frame `event`."""
    rng = np.random.default_rng(seed)
    lam = np.full((64, 64), dose)
    lam[40:, 10:50] *= 0.55
    after = lam.copy()
    after[39, 12:52] = dose * 0.55
    frames = np.empty((n, 64, 64), np.uint16)
    frames[:event] = rng.poisson(lam, size=(event, 64, 64))
    frames[event:] = rng.poisson(after, size=(n - event, 64, 64))
    return frames


def test_single_layer_at_400_fps_is_on_its_exact_frame():
    # common practice, no source: at 400 frames/s a whole layer can appear within one 2.5 ms frame,
    # so the first frame showing the new row is the event's frame
    res = scan_movie(ArrayMovie(_platelet_movie(), timing=Timing(fps=400.0)))
    c = res.candidates
    assert len(c) == 1, c
    row = c.iloc[0]
    assert row["frame"] == 200 and row["kind"] == "step"
    assert row["time_s"] == pytest.approx(200 / 400.0)
    assert abs(row["y"] - 39) <= 6 and abs(row["x"] - 32) <= 16
    # re-detection from the saved features alone gives the same answer
    again = propose(res.features, DetectSettings(), Timing(fps=400.0))
    assert list(again["frame"]) == [200]

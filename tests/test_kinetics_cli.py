"""`reviewer kinetics` end to end: the acceptance table checked against scipy / numpy computed here,
bad inputs, grouping, text output and the plot."""

from __future__ import annotations

import json

import numpy as np
import pytest
from PIL import Image
from scipy import stats

from reviewer.cli import main
from reviewer.store.table import write_csv

FPS = 400.0


def _row(i: int, frame: int, status: str, label: str, x: float = 50.0, y: float = 40.0,
         time_s: str | float | None = "auto", kind: str = "step") -> dict:
    t = frame / FPS if time_s == "auto" else time_s
    return dict(event_id=f"e{i:04d}", frame=frame, time_s=t, frame_end=None, kind=kind, score=5.0,
                x=x, y=y, status=status, label=label, note="", source="detector",
                reviewed_at="2025-01-01T00:00:00Z")


def write_table(folder, rows: list[dict], frames: int | None = None, fps: float | None = FPS,
                name: str = "events", sidecar: bool = True):
    path = folder / f"{name}.csv"
    rows = sorted(rows, key=lambda r: r["frame"])
    for i, r in enumerate(rows):
        r["event_id"] = f"e{i:04d}"
    write_csv(rows, path)
    if sidecar:
        duration = frames / fps if frames and fps else None
        (folder / f"{name}.json").write_text(json.dumps(
            {"movie": {"frames": frames, "fps": fps, "duration_s": duration, "path": "demo.tif"}}))
    return path


def acceptance_rows(seed: int = 7) -> tuple[list[dict], np.ndarray]:
    """81 accepted 'layer' events (gamma-distributed waits, on the 400 frames/s grid), plus rejected
    and other-label rows in between."""
    rng = np.random.default_rng(seed)
    waits = np.maximum(1, np.round(rng.gamma(3.0, 0.06, 80) * FPS)).astype(int)
    frames = np.concatenate([[37], 37 + np.cumsum(waits)])
    rows = [_row(0, int(f), "accepted", "layer") for f in frames]
    noise = rng.integers(0, frames[-1], 40)
    rows += [_row(0, int(f), "rejected", "layer") for f in noise[:15]]
    rows += [_row(0, int(f), "accepted", "island", x=90, y=20) for f in noise[15:30]]
    rows += [_row(0, int(f), "candidate", "") for f in noise[30:]]
    return rows, frames / FPS


def run_json(capsys, argv) -> dict:
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def rel(a, b):
    return abs(a - b) / abs(b)


def test_wiring_every_figure_reaches_the_json(tmp_path, capsys):
    # A WIRING test, not a reference check: it repeats the program's own scipy calls (same
    # functions, arguments and seeds), so it shows that each figure is computed on the selected
    # events and lands under its --json key, not that the right statistic was chosen. The figures
    # are checked against independent references in tests/test_kinetics_references.py.
    rows, times = acceptance_rows()
    n_frames = int(round(times[-1] * FPS)) + 120
    path = write_table(tmp_path, rows, frames=n_frames)
    out = run_json(capsys, ["kinetics", str(path), "--label", "layer", "--layer-nm", "0.2",
                            "--json"])
    x = np.diff(times)
    n, k, span, T = 81, 80, times[-1] - times[0], n_frames / FPS
    assert out["events"] == n and out["intervals"] == k
    # numpy on the same data
    assert rel(out["span_s"], span) < 1e-6
    assert rel(out["interval_mean_s"], np.mean(x)) < 1e-6
    assert rel(out["interval_median_s"], np.median(x)) < 1e-6
    assert rel(out["interval_sd_s"], np.std(x, ddof=1)) < 1e-6
    assert rel(out["interval_cv"], np.std(x, ddof=1) / np.mean(x)) < 1e-6
    # scipy.stats.bootstrap (BCa, same seed and resamples) for the CV interval
    boot = stats.bootstrap((x,), lambda a, axis: np.std(a, axis=axis, ddof=1) / np.mean(a, axis=axis),
                           n_resamples=9999, vectorized=True, rng=0).confidence_interval
    assert rel(out["interval_cv_ci95"][0], boot.low) < 1e-6
    assert rel(out["interval_cv_ci95"][1], boot.high) < 1e-6
    # rate k/span with the chi-square pivot 2*rate*span ~ chi2(2k) (scipy.stats.chi2)
    assert rel(out["rate_per_s"], k / span) < 1e-6
    assert rel(out["rate_ci95_per_s"][0], stats.chi2.ppf(0.025, 2 * k) / (2 * span)) < 1e-6
    assert rel(out["rate_ci95_per_s"][1], stats.chi2.ppf(0.975, 2 * k) / (2 * span)) < 1e-6
    # count rate n/T with the Garwood interval (scipy.stats.chi2), T from the sidecar
    assert rel(out["count_rate_per_s"], n / T) < 1e-6
    assert rel(out["count_rate_ci95_per_s"][0], stats.chi2.ppf(0.025, 2 * n) / 2 / T) < 1e-6
    assert rel(out["count_rate_ci95_per_s"][1], stats.chi2.ppf(0.975, 2 * n + 2) / 2 / T) < 1e-6
    # scipy.stats.expon.fit / gamma.fit with the location fixed at 0
    _, e_scale = stats.expon.fit(x, floc=0)
    assert rel(out["exponential_scale_s"], e_scale) < 1e-6
    assert rel(out["exponential_rate_per_s"], 1 / e_scale) < 1e-6
    g_shape, _, g_scale = stats.gamma.fit(x, floc=0)
    assert rel(out["gamma_shape"], g_shape) < 0.01
    assert rel(out["gamma_scale_s"], g_scale) < 0.01
    # profile-likelihood bounds: log-likelihood (scipy.stats.gamma.logpdf, scale at its MLE for
    # that shape) drops by chi2_0.95(1)/2 at each bound
    def prof(a):
        return np.sum(stats.gamma.logpdf(x, a, scale=np.mean(x) / a))
    lo, hi = out["gamma_shape_ci95"]
    assert lo < g_shape < hi
    for bound in (lo, hi):
        assert 2 * (prof(g_shape) - prof(bound)) == pytest.approx(stats.chi2.ppf(0.95, 1), rel=1e-6)
    # scipy.stats.goodness_of_fit, same statistic, samples and seed
    gof = stats.goodness_of_fit(stats.expon, x, known_params={"loc": 0}, statistic="ks",
                                n_mc_samples=9999, rng=0)
    assert rel(out["gof_p_exponential"], gof.pvalue) < 1e-6
    assert rel(out["velocity_nm_per_s"], 0.2 * k / span) < 1e-6
    assert out["groups"] is None
    assert "more regular than Poisson arrivals" in out["reading"]  # gamma(3) waits: CV near 0.58


@pytest.mark.parametrize("case, expect", [
    ("missing_file", "no such file"),
    ("missing_columns", "missing column"),
    ("non_numeric", "not a number"),
    ("unsorted", "not in increasing order"),
    ("no_accepted", "3 rejected"),
    ("single", "two events are the minimum for an interval"),
    ("bad_sidecar", "sidecar"),
    ("no_time", "no time_s"),
    ("bad_roi", "region needs"),
])
def test_bad_input_one_line_exit_2(tmp_path, capsys, case, expect):
    path = tmp_path / "events.csv"
    extra: list[str] = []
    good = [_row(0, f, "accepted", "layer") for f in (10, 50, 90)]
    if case == "missing_columns":
        path.write_text("event_id,frame,label\r\ne0,1,layer\r\n")
    elif case == "non_numeric":
        write_table(tmp_path, good[:2] + [_row(0, 95, "accepted", "layer", time_s="soon")])
    elif case == "unsorted":
        write_table(tmp_path, good[:2] + [_row(0, 95, "accepted", "layer", time_s=0.01)])
    elif case == "no_accepted":
        write_table(tmp_path, [_row(0, f, "rejected", "layer") for f in (1, 2, 3)])
    elif case == "single":
        write_table(tmp_path, good[:1] + [_row(0, 60, "rejected", "layer")])
    elif case == "bad_sidecar":
        write_table(tmp_path, good)
        (tmp_path / "events.json").write_text("{not json")
    elif case == "no_time":
        write_table(tmp_path, good[:2] + [_row(0, 95, "accepted", "layer", time_s=None)],
                    sidecar=False)
    elif case == "bad_roi":
        write_table(tmp_path, good)
        (tmp_path / "roi.csv").write_text("name,x0,y0,x1\nA,0,0,5\n")
        extra = ["--roi", str(tmp_path / "roi.csv")]
    assert main(["kinetics", str(path), *extra]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and expect in lines[0], captured.err


def test_frame_times_on_the_frame_grid_without_time_column(tmp_path, capsys):
    # frame times at 400 frames/s fall on a 2.5 ms grid (common practice, no source)
    frames = [3, 11, 12, 40, 41, 77, 150]
    rows = [_row(0, f, "accepted", "layer", time_s=None) for f in frames]
    path = write_table(tmp_path, rows, frames=200)
    out = run_json(capsys, ["kinetics", str(path), "--json"])
    assert out["span_s"] == pytest.approx((150 - 3) * 0.0025, rel=1e-12)
    assert out["interval_median_s"] / 0.0025 == pytest.approx(round(out["interval_median_s"] / 0.0025))
    assert out["count_rate_per_s"] == pytest.approx(7 / (200 * 0.0025))


def test_without_sidecar_count_rate_is_null(tmp_path, capsys):
    rows, _ = acceptance_rows()
    path = write_table(tmp_path, rows, sidecar=False)
    out = run_json(capsys, ["kinetics", str(path), "--label", "layer", "--json"])
    assert out["count_rate_per_s"] is None and out["count_rate_ci95_per_s"] is None
    assert out["velocity_nm_per_s"] is None
    assert main(["kinetics", str(path), "--label", "layer"]) == 0
    assert "unknown (no movie duration)" in capsys.readouterr().out


def test_text_table_names_each_rate_and_the_pitfalls(tmp_path, capsys):
    rows, _ = acceptance_rows()
    rows += [_row(0, 37, "accepted", "layer")]  # a second layer in the first event's frame
    path = write_table(tmp_path, rows, frames=20000)
    assert main(["kinetics", str(path), "--label", "layer", "--layer", "si111"]) == 0
    text = capsys.readouterr().out
    assert "rate k/span  [95 %, chi-square exact]" in text
    assert "count rate n/T  [95 %, Garwood exact]" in text
    assert "1 frame = 2.5 ms" in text
    assert "fall in one frame" in text
    assert "cut by the recording" in text
    assert "CODATA 2018" in text
    assert "9999 resamples" in text


def test_by_label_and_region_and_roi(tmp_path, capsys):
    rng = np.random.default_rng(3)
    rows = []
    for cx, label in ((20.0, "layer"), (110.0, "layer"), (60.0, "island")):
        frames = np.cumsum(rng.integers(5, 60, 30))
        rows += [_row(0, int(f), "accepted", label, x=cx + rng.uniform(-4, 4),
                      y=50 + rng.uniform(-4, 4)) for f in frames]
    path = write_table(tmp_path, rows, frames=3000)
    out = run_json(capsys, ["kinetics", str(path), "--by", "label", "--json"])
    assert {g["group"]: g["events"] for g in out["groups"]} == {"layer": 60, "island": 30}
    out = run_json(capsys, ["kinetics", str(path), "--label", "layer", "--by", "region",
                            "--radius", "20", "--json"])
    assert [g["events"] for g in out["groups"]] == [30, 30] and out["radius_px"] == 20
    assert out["events"] == 60
    roi = tmp_path / "fronts.json"
    roi.write_text(json.dumps({"regions": [{"name": "left", "x0": 0, "y0": 0, "x1": 40, "y1": 96},
                                           {"name": "right", "x0": 90, "y0": 0, "x1": 128,
                                            "y1": 96}]}))
    out = run_json(capsys, ["kinetics", str(path), "--roi", str(roi), "--json"])
    assert {g["group"]: g["events"] for g in out["groups"]} == {"left": 30, "right": 30,
                                                                "outside ROIs": 30}
    assert all(g["rate_per_s"] > 0 for g in out["groups"])


def test_plot_png(tmp_path, capsys):
    rows, _ = acceptance_rows()
    path = write_table(tmp_path, rows, frames=20000)
    png = tmp_path / "k.png"
    assert main(["kinetics", str(path), "--by", "label", "--plot", str(png)]) == 0
    capsys.readouterr()
    with Image.open(png) as img:  # Pillow reads back what we wrote
        assert img.format == "PNG" and img.size == (3 * 520, 2 * 340)
        colours = {c for _, c in img.convert("RGB").getcolors(1 << 20)}
    assert (200, 60, 40) in colours and (30, 120, 60) in colours  # exponential and gamma curves


def test_roi_csv_file_and_unplaced_events(tmp_path, capsys):
    rows = [_row(0, f, "accepted", "layer", x=10.0, y=10.0) for f in (5, 30, 70, 120)]
    rows += [_row(0, f, "accepted", "layer", x=float("nan"), y=float("nan")) for f in (8, 60)]
    path = write_table(tmp_path, rows, frames=400)
    roi = tmp_path / "roi.csv"
    roi.write_text("name,x0,y0,x1,y1\nedge,0,0,20,20\nempty,50,50,60,60\n")
    out = run_json(capsys, ["kinetics", str(path), "--roi", str(roi), "--json"])
    got = {g["group"]: g for g in out["groups"]}
    assert got["edge"]["events"] == 4 and got["edge"]["span_s"] == pytest.approx(115 / FPS)
    assert got["empty"]["events"] == 0 and "two events are the minimum" in got["empty"]["error"]
    assert got["no position"]["events"] == 2

"""Runs at several temperatures: the weighted Arrhenius fit against scipy's curve_fit, a worked
example with known activation energy, and the run table's bad inputs."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy.optimize import curve_fit

from reviewer.cli import main
from reviewer.kinetics.arrhenius import K_B_EV, fit


def test_fit_equals_scipy_curve_fit():
    t = np.array([700.0, 730.0, 760.0, 800.0])
    rate = 1e10 * np.exp(-1.2 / (K_B_EV * t)) * np.exp([0.05, -0.1, 0.08, -0.02])
    lo, hi = rate * 0.8, rate * np.array([1.3, 1.2, 1.5, 1.25])
    got = fit(t, rate, lo, hi)
    sigma = (np.log(hi) - np.log(lo)) / (2 * 1.959963984540054)
    (b0, b1), cov = curve_fit(lambda x, a, b: a + b * x, 1 / t, np.log(rate), sigma=sigma,
                              absolute_sigma=True)  # scipy reference
    assert got["slope_K"] == pytest.approx(b1, rel=1e-7)
    assert got["ln_prefactor_per_s"] == pytest.approx(b0, rel=1e-7)
    assert got["slope_se_K"] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-6)
    assert got["activation_energy_eV"] == pytest.approx(-b1 * K_B_EV, rel=1e-7)


def test_exact_rates_give_the_activation_energy():
    # worked example: rate = A exp(-Ea / (k_B T)) with Ea = 0.9 eV, A = 1e7 /s, no noise
    t = np.array([600.0, 650.0, 700.0])
    rate = 1e7 * np.exp(-0.9 / (K_B_EV * t))
    got = fit(t, rate, rate / 1.2, rate * 1.2)
    assert got["activation_energy_eV"] == pytest.approx(0.9, rel=1e-10)
    assert got["ln_prefactor_per_s"] == pytest.approx(np.log(1e7), rel=1e-10)


def _run_tables(folder, ea=1.0, a=3e7, temps=(600.0, 640.0, 680.0, 720.0)):
    rng = np.random.default_rng(4)
    lines = ["run,table,temperature_C"]
    for i, tk in enumerate(temps):
        rate = a * np.exp(-ea / (K_B_EV * tk))
        t = np.cumsum(rng.exponential(1 / rate, 200))
        rows = ["event_id,frame,time_s,status,label"]
        rows += [f"e{j},{int(v * 100)},{float(v)!r},accepted,layer" for j, v in enumerate(t)]
        (folder / f"run{i}.csv").write_text("\r\n".join(rows) + "\r\n")
        lines.append(f"r{i},run{i}.csv,{tk - 273.15}")
    path = folder / "runs.csv"
    path.write_text("\n".join(lines) + "\n")
    return path


def test_run_table_through_the_command(tmp_path, capsys):
    path = _run_tables(tmp_path)
    assert main(["kinetics", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert [r["run"] for r in out["runs"]] == ["r0", "r1", "r2", "r3"]
    assert out["runs"][0]["temperature_K"] == pytest.approx(600.0)
    lo, hi = out["arrhenius"]["activation_energy_ci95_eV"]
    assert lo < 1.0 < hi and hi - lo < 0.3  # 200 events a run: the truth inside a tight interval
    assert main(["kinetics", str(path)]) == 0
    assert "Activation energy" in capsys.readouterr().out


@pytest.mark.parametrize("body, expect", [
    ("table,temperature_K\nrun0.csv,700\n", "at least two"),
    ("table,temperature_K\nrun0.csv,hot\nrun1.csv,800\n", "row 1: temperature 'hot'"),
    ("table,temperature_K\nrun0.csv,700\nmissing.csv,800\n", "missing.csv: no such file"),
    ("table,temperature_K\nrun0.csv,-5\nrun1.csv,800\n", "not a temperature"),
])
def test_bad_run_tables(tmp_path, capsys, body, expect):
    _run_tables(tmp_path)
    path = tmp_path / "bad.csv"
    path.write_text(body)
    assert main(["kinetics", str(path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and expect in err[0], err

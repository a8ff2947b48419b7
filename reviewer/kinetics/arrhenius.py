"""Several runs at different temperatures: a run table, and an Arrhenius fit of their rates.

Run table (our format): CSV with a header row and the columns
  table          path of a run's exported event table (relative to the run table's folder)
  temperature_K  or temperature_C: the run's temperature
  run            optional name (default: the table's file name)

Fit: ln(rate) = ln(A) - Ea / (k_B T), weighted least squares in 1/T with each run's weight from its
rate interval (sigma of ln(rate) = (ln hi - ln lo) / (2 x 1.96)), sigmas taken as known; the
activation energy's 95 % interval is Ea +- 1.96 x its standard error. The reduced chi-square says
whether the runs scatter more than their intervals allow (then the interval is too narrow).
"""

from __future__ import annotations

import csv
import math
import os
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput

K_B_EV = 8.617333262e-5  # Boltzmann constant, eV/K (CODATA 2018, exact by the 2019 SI)
ZERO_C = 273.15
Z95 = 1.959963984540054


def is_run_table(path: str | os.PathLike) -> bool:
    """True when the CSV's header names a table column and a temperature (and no frame column)."""
    try:
        with open(path, newline="", encoding="utf-8") as f:
            header = [h.strip() for h in next(csv.reader(f), [])]
    except (OSError, UnicodeDecodeError, csv.Error):
        return False
    return ("table" in header and "frame" not in header
            and ("temperature_K" in header or "temperature_C" in header))


def read_runs(path: str | os.PathLike) -> list[dict]:
    """[{run, table (Path), temperature_K}] from a run table; BadInput naming the row."""
    path = Path(path)
    try:
        rows = list(csv.DictReader(path.read_text(encoding="utf-8").splitlines()))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise BadInput(f"{path}: cannot read the run table ({exc})") from None
    runs = []
    for i, row in enumerate(rows, 1):
        name = (row.get("table") or "").strip()
        if not name:
            raise BadInput(f"{path}: row {i}: no table")
        kelvin, celsius = (row.get("temperature_K") or "").strip(), (
            row.get("temperature_C") or "").strip()
        try:
            temp = float(kelvin) if kelvin else float(celsius) + ZERO_C
        except ValueError:
            raise BadInput(f"{path}: row {i}: temperature {kelvin or celsius!r} is not a "
                           "number") from None
        if not (math.isfinite(temp) and 0 < temp < 1e5):
            raise BadInput(f"{path}: row {i}: temperature {temp:g} K is not a temperature")
        table = (path.parent / name).resolve()
        runs.append({"run": (row.get("run") or "").strip() or Path(name).name, "table": table,
                     "temperature_K": temp})
    if len(runs) < 2:
        raise BadInput(f"{path}: {len(runs)} run(s): an Arrhenius fit needs at least two")
    if len({r["run"] for r in runs}) != len(runs):
        raise BadInput(f"{path}: run names must be unique")
    return runs


def fit(temperature_k, rate, lo, hi) -> dict:
    """Weighted Arrhenius fit; returns Ea (eV) with its interval, ln A, and the reduced chi-square.
    """
    t, r = np.asarray(temperature_k, float), np.asarray(rate, float)
    sigma = (np.log(np.asarray(hi, float)) - np.log(np.asarray(lo, float))) / (2 * Z95)
    x, y, w = 1.0 / t, np.log(r), 1.0 / sigma**2
    sw, sx, sy = w.sum(), (w * x).sum(), (w * y).sum()
    sxx, sxy = (w * x * x).sum(), (w * x * y).sum()
    det = sw * sxx - sx * sx
    slope = (sw * sxy - sx * sy) / det
    intercept = (sxx * sy - sx * sxy) / det
    se_slope = math.sqrt(sw / det)
    resid = y - (intercept + slope * x)
    dof = t.size - 2
    ea = -slope * K_B_EV
    half = Z95 * se_slope * K_B_EV
    return {"activation_energy_eV": float(ea),
            "activation_energy_ci95_eV": [float(ea - half), float(ea + half)],
            "ln_prefactor_per_s": float(intercept),
            "slope_K": float(slope), "slope_se_K": float(se_slope),
            "reduced_chi2": float(np.sum(w * resid**2) / dof) if dof > 0 else None,
            "method": "weighted least squares of ln(rate) on 1/T, weights from each rate's "
                      "95 % interval (sigmas known); Ea = -slope x k_B, +- 1.96 standard errors"}


def summarise_runs(path: str | os.PathLike, statuses: tuple[str, ...], label: str | None,
                   seed: int) -> dict:
    """Every run's rate (k/span, with its gamma-renewal interval where there is one, else the
    Poisson one) and the Arrhenius fit across the runs."""
    from reviewer.kinetics.read import read_events, select_events
    from reviewer.kinetics.summary import summarise

    runs = read_runs(path)
    rows = []
    for r in runs:
        df = read_events(r["table"])
        sel = select_events(df, label, statuses)
        info = df.attrs.get("movie", {})
        fps = info.get("fps")
        try:
            s = summarise(sel["time_s"].to_numpy(float), info.get("duration_s"),
                          frame_s=1.0 / fps if fps else None, seed=seed, budget=1 / len(runs))
        except ValueError as exc:
            raise BadInput(f"{r['table']}: {exc}") from None
        ci, used = s.get("rate_renewal_ci95_per_s"), "gamma renewal"
        if not ci:
            ci, used = s["rate_ci95_per_s"], "Poisson exact"
        rows.append({"run": r["run"], "table": str(r["table"]), "temperature_K": r["temperature_K"],
                     "events": s["events"], "rate_per_s": s["rate_per_s"], "rate_ci95_per_s": ci,
                     "interval": used, "reading": s["reading"]})
    result = fit([r["temperature_K"] for r in rows], [r["rate_per_s"] for r in rows],
                 [r["rate_ci95_per_s"][0] for r in rows], [r["rate_ci95_per_s"][1] for r in rows])
    return {"source": str(path), "statuses": list(statuses), "label": label, "runs": rows,
            "arrhenius": result, "rate_used": "k/span of each run (the complete intervals)"}


def render_runs(result: dict) -> str:
    """Terminal text: one line per run, then the fit."""
    out = [f"{result['source']}: {len(result['runs'])} runs", ""]
    width = max(len(r["run"]) for r in result["runs"])
    for r in result["runs"]:
        lo, hi = r["rate_ci95_per_s"]
        out.append(f"  {r['run']:<{width}}  T = {r['temperature_K']:.1f} K  n = {r['events']:<5} "
                   f"rate {r['rate_per_s']:.3g} /s  [{lo:.3g}, {hi:.3g}] ({r['interval']})")
    a = result["arrhenius"]
    lo, hi = a["activation_energy_ci95_eV"]
    chi = a["reduced_chi2"]
    out += ["", f"Activation energy {a['activation_energy_eV']:.3g} eV  [95 %: {lo:.3g}, {hi:.3g}]"
                f"; ln A = {a['ln_prefactor_per_s']:.3g} (A in 1/s)"
                + (f"; reduced chi-square {chi:.2g}" + (" (the runs scatter more than their "
                   "intervals allow: the interval is too narrow)" if chi > 2 else "")
                   if chi is not None else ""),
            f"Fit: {a['method']}. Rates: {result['rate_used']}."]
    return "\n".join(out) + "\n"

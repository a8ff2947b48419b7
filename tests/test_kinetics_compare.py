"""Two groups compared: equal rates against statsmodels' exact conditional test, the rate-ratio
interval by its definition, the CV test's level, and the command's --json with ROI areas."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats import rates as sm_rates

from reviewer.cli import main
from reviewer.kinetics.compare import cvs, rates


@pytest.mark.parametrize("n1, e1, n2, e2", [(30, 10.0, 15, 10.0), (60, 4e4, 25, 2.5e5),
                                            (3, 1.0, 9, 2.0), (0, 5.0, 4, 5.0)])
def test_equal_rate_p_equals_statsmodels(n1, e1, n2, e2):
    got = rates(n1, e1, n2, e2)
    ref = sm_rates.test_poisson_2indep(n1, e1, n2, e2, method="exact-cond")  # statsmodels reference
    assert got["equal_rate_p"] == pytest.approx(ref.pvalue, rel=1e-9)
    if n1 and n2:
        assert got["rate_ratio"] == pytest.approx((n1 / e1) / (n2 / e2))


def test_rate_ratio_interval_is_the_exact_binomial_inversion():
    # at each bound, the binomial tail of the observed split is 2.5 % (Clopper-Pearson definition,
    # scipy.stats.binom) once the rate ratio is turned into the binomial share
    n1, e1, n2, e2 = 40, 3.0, 22, 5.0
    lo, hi = rates(n1, e1, n2, e2)["rate_ratio_ci95"]
    for r, tail in ((lo, stats.binom.sf(n1 - 1, n1 + n2, lo * e1 / (lo * e1 + e2))),
                    (hi, stats.binom.cdf(n1, n1 + n2, hi * e1 / (hi * e1 + e2)))):
        assert tail == pytest.approx(0.025, rel=1e-6), r


def test_equal_cv_test_keeps_its_level():
    rng = np.random.default_rng(3)
    alarms = sum(cvs(rng.exponential(1.0, 30), rng.exponential(5.0, 20), seed=i)["equal_cv_p"]
                 < 0.05 for i in range(100))
    assert alarms <= 11  # binomial(100, 0.05): 11 is above the 99th percentile
    hit = cvs(rng.gamma(6.0, 1.0, 40), rng.exponential(1.0, 40), seed=0)["equal_cv_p"]
    assert hit < 0.01


def test_roi_groups_compare_per_area(tmp_path, capsys):
    rng = np.random.default_rng(2)
    frames = sorted([(int(f), 10, 10, "a") for f in rng.choice(40000, 60, replace=False)]
                    + [(int(f), 100, 100, "b") for f in rng.choice(40000, 25, replace=False)])
    lines = ["event_id,frame,time_s,x,y,status,label"]
    lines += [f"e{i},{f},,{x},{y},accepted,{lab}" for i, (f, x, y, lab) in enumerate(frames)]
    (tmp_path / "t.csv").write_text("\r\n".join(lines) + "\r\n")
    (tmp_path / "t.json").write_text(json.dumps({"movie": {"frames": 40000, "fps": 400.0}}))
    (tmp_path / "roi.csv").write_text("name,x0,y0,x1,y1\nA,0,0,19,19\nB,90,90,139,139\n")
    assert main(["kinetics", str(tmp_path / "t.csv"), "--roi", str(tmp_path / "roi.csv"),
                 "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    c = out["comparison"]
    assert c["groups"] == ["A", "B"] and c["counts"] == [60, 25]
    assert c["exposures"] == [100.0 * 400, 100.0 * 2500]  # window x area (corners included)
    ref = sm_rates.test_poisson_2indep(60, 40000.0, 25, 250000.0, method="exact-cond")
    assert c["equal_rate_p"] == pytest.approx(ref.pvalue, rel=1e-9)
    a = out["groups"][0]
    assert a["area_px2"] == 400 and a["count_rate_per_s_px2"] == pytest.approx(60 / 100 / 400)

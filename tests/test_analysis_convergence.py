"""The convergence rule in coefficient counts (caseprep.contract.convergence:
every coefficient against its own tolerance over the settled window)."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.contract.convergence import ConvergenceOptions, assess, count_stats, judge_coefficients
from caseprep.contract.errors import UserError

N = 300
T = np.arange(N)
# a diffuser-floor case: −C_L 1.6, C_D 0.26, C_S 0.05 (the numbers of the rule's docstring; invented)
BASE = {"cl": -1.6, "cd": 0.26, "cs": 0.05, "cl_front": -0.7, "cl_rear": -0.9, "cn": -0.02}


def _steady(osc=0.001):
    """Each coefficient with a 0.1 % oscillation (5 whole periods over the window)."""
    return {k: v * (1 + osc * np.sin(2 * np.pi * 5 * T / N)) for k, v in BASE.items()}


def test_side_force_wandering_3_percent_is_not_converged():
    s = _steady()
    s["cs"] = BASE["cs"] * (1 + 0.03 * np.linspace(-1, 1, N))    # ±3 % drift across the window
    r = judge_coefficients(s)
    assert r["series"]["cs"]["verdict"] == "diverging" and r["verdict"] == "diverging"
    assert r["series"]["cs"]["drift"] == pytest.approx(0.06 * BASE["cs"], rel=1e-9)
    # the loose rule (each force component within 1 % of the resultant) calls the same monitor
    # converged: the side force is 3 % of a resultant ≈ 1.62 — why a rule in counts is needed
    loose = assess(s, window=N, floor=float(np.hypot(BASE["cl"], BASE["cd"])), options=ConvergenceOptions())
    assert loose.series["cs"].verdict == "converged"


def test_a_0p1_percent_oscillation_is_converged_and_reports_the_window_mean():
    r = judge_coefficients(_steady())
    assert r["verdict"] == "converged"
    for k, v in BASE.items():
        # a whole number of sine periods: the window mean is the offset exactly
        assert r["means"][k] == pytest.approx(v, abs=1e-12)
        assert r["stds"][k] == pytest.approx(abs(v) * 0.001 / np.sqrt(2), rel=1e-9)   # std of a sine: A/√2
    assert r["means"]["balance"] == pytest.approx(0.7 / 1.6, abs=1e-12)


def test_balance_is_judged_per_sample():
    s = _steady(0.0)
    s["cl_front"] = BASE["cl_front"] + 0.004 * np.linspace(-1, 1, N)   # each axle within 0.005 …
    s["cl_rear"] = BASE["cl_rear"] - 0.004 * np.linspace(-1, 1, N)
    r = judge_coefficients(s)
    assert r["series"]["cl_front"]["verdict"] == "diverging"            # … drift 0.008 > 0.005
    assert abs(r["series"]["balance"]["drift"]) == pytest.approx(0.008 / 1.6, rel=1e-6)
    assert r["series"]["balance"]["verdict"] == "diverging"             # 0.005 > 0.003


def test_bad_windows_are_refused():
    with pytest.raises(UserError, match="at least 3"):
        count_stats("cl", [1.0, 1.0], 0.005)
    with pytest.raises(UserError, match="cx"):
        judge_coefficients({"cx": np.ones(10)})
    assert count_stats("cl", [1.0, np.nan, 1.0], 0.005).verdict == "diverging"
    # the tolerances are options of the one rule: a looser lift tolerance passes the same series
    wander = {"cl": -1.6 + 0.004 * np.linspace(-1, 1, N)}
    assert judge_coefficients(wander)["verdict"] == "diverging"
    assert judge_coefficients(wander, ConvergenceOptions(count_tol_lift=0.01))["verdict"] == "converged"


def test_monitor_series_reduce_like_the_export():
    # a monitor holding the same loads every sample gives, per sample, exactly the
    # coefficients of the export's reduction (postproc.coefficients) — one definition
    from postproc.kernels import coefficients as co
    from postproc.pipelines.monitor_coefficients import _result, coefficient_series, judge_monitor

    ref = co.ReferenceValues(area=1.2, length=2.0, rho=1.2, speed=40.0, moment_point=(1.0, 0.0, 0.0),
                             front_axle=(0.3, 0.0, 0.1), rear_axle=(2.8, 0.0, 0.1))
    F, M = np.array([120.0, 15.0, -1800.0]), np.array([30.0, -250.0, 12.0])
    n = 40
    mon = {f"force.total_{c}": np.full(n, F[i]) for i, c in enumerate("xyz")}
    mon.update({f"moment.total_{c}": np.full(n, M[i]) for i, c in enumerate("xyz")})
    axle = (np.eye(3)[0], np.eye(3)[1], np.eye(3)[2], np.zeros(3))   # level body on the plane z = 0
    s = coefficient_series(mon, ref, axle=axle, window=20)
    r = _result(F, M, np.array(ref.moment_point))
    c, b = co.coefficients(r, ref), co.balance(r, ref)     # level body, zero yaw
    assert len(s["cl"]) == 20
    assert s["cl"][0] == pytest.approx(c.lift) and s["cd"][0] == pytest.approx(c.drag)
    assert s["cn"][0] == pytest.approx(c.yawing)
    assert s["cl_front"][0] == pytest.approx(b.c_lift_front) and s["cl_rear"][0] == pytest.approx(b.c_lift_rear)
    v = judge_monitor(mon, ref, axle=axle, window=20)
    assert v["verdict"] == "converged" and v["means"]["cl"] == pytest.approx(c.lift)

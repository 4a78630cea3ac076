"""Untrusted input never crashes the analysis: random cells give a table or a
UserError; random designs give a map or a refusal (property tests)."""
from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from caseprep.contract.errors import UserError
from postproc.io.results_table import read_results_csv
from postproc.kernels.mapfit import MapOptions, fit_map

HEAD = "variant,ride_height_front,ride_height_rear,yaw_deg,speed,mesh_level,cl,cd,cs,cl_front,cl_rear,flags"
GOOD = ["a", "0.02", "0.03", "0", "40", "0", "-1.2", "0.4", "0", "-0.5", "-0.7", ""]
cell = st.one_of(st.text(alphabet=st.characters(blacklist_categories=("Cs",), blacklist_characters=',"\r\n'),
                         max_size=8),
                 st.sampled_from(["nan", "inf", "-1", "1e9", "0", "", "1.5", "20", "true"]))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(col=st.integers(0, len(GOOD) - 1), value=cell)
def test_random_cell_gives_a_table_or_a_user_error(tmp_path, col, value):
    row = list(GOOD)
    row[col] = value
    p = tmp_path / "r.csv"
    p.write_text(HEAD + "\n" + ",".join(GOOD) + "\n" + ",".join(row) + "\n", encoding="utf-8")
    try:
        t = read_results_csv(p)
    except UserError as exc:
        assert str(exc)
    else:
        assert len(t) == 2 and np.all(t.col("ride_height_front") > 0)


@settings(max_examples=40, deadline=None)
@given(n=st.integers(1, 14), seed=st.integers(0, 10_000), line=st.booleans())
def test_random_designs_give_a_map_or_a_refusal(n, seed, line):
    rng = np.random.default_rng(seed)
    hf = np.round(rng.uniform(0.01, 0.05, n), 4)
    hr = hf + 0.01 if line else np.round(rng.uniform(0.02, 0.07, n), 4)
    keep = np.unique(np.stack([hf, hr], 1), axis=0, return_index=True)[1]
    hf, hr = hf[keep], hr[keep]
    y = rng.normal(-1.2, 0.05, hf.size)
    f = fit_map(hf, hr, y, MapOptions(smooth_min_points=8))
    if f.ok:
        assert np.isfinite(f.loo_rms) and np.isfinite(float(f(hf[0], hr[0])))
        assert hf.size >= f.chosen.terms + 3 or f.model == "tps"
    else:
        assert f.reason

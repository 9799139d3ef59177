"""Model options a user sets: piecewise cut points, merging of empty bands, project-file keys.

Hand-worked cases (working beside each check); the occurrence / exposure rate
of a band is the piecewise-constant MLE (Holford 1976).
"""

from __future__ import annotations

import numpy as np
import pytest

from retain import StartStop
from retain.errors import ModelError
from retain.kernels.parametric import merge_empty_bands
from retain.models.parametric import compare_models, fit_piecewise
from retain.paths import DEMO_DIR


def _minimum_term() -> StartStop:
    """A minimum term: nobody churns before day 30.

    customer  (start, stop]  churned   exposure (0,30] (30,60] (60,inf)
    a         (0, 40]        1                    30     10      0
    b         (0, 50]        1                    30     20      0
    c         (0, 70]        1                    30     30     10
    d         (0, 90]        0                    30     30     30
    e         (0, 20]        0                    20      0      0
    churns by band: 0, 2, 1; exposure 140, 90, 40.
    The band (0,30] has no churn: merged with the next, (0,60] has 2 churns in
    230 days; (60,inf) 1 in 40.
    """
    return StartStop([0.0] * 5, [40, 50, 70, 90, 20], [1, 1, 1, 0, 0],
                     customer_id=list("abcde"))


def test_empty_first_band_merges_with_the_next():
    fit = fit_piecewise(_minimum_term(), cuts=[30, 60])
    assert fit.requested_cuts == (30.0, 60.0) and fit.cuts == (60.0,)
    np.testing.assert_allclose(np.exp(fit.params), [2 / 230, 1 / 40], rtol=1e-12)
    assert fit.merged_bands == ("0 to 30 days + 30 to 60 days -> 0 to 60 days (no churns or "
                                "no time at risk in 0 to 30 days)",)


def test_band_past_the_follow_up_merges_with_the_one_before():
    """Cut 120 lies past the longest tenure (90): the band (120, inf) has no time at risk.

    Bands asked (0,30] (30,60] (60,120] (120,inf): churns 0, 2, 1, 0; exposure 140, 90,
    40, 0. First (0,30] merges forward, then (120,inf) (last) merges back: cuts (60,).
    """
    fit = fit_piecewise(_minimum_term(), cuts=[30, 60, 120])
    assert fit.cuts == (60.0,)
    np.testing.assert_allclose(np.exp(fit.params), [2 / 230, 1 / 40], rtol=1e-12)
    assert len(fit.merged_bands) == 2


def test_merge_kernel_cases():
    """Cut j separates band j and j+1; the first empty band goes forward, the last back."""
    ev, ex = np.array([1.0, 0.0, 2.0, 0.0]), np.array([5.0, 5.0, 5.0, 5.0])
    # band 1 empty -> drop cut 1 (bands 1+2); then band 3 (last) empty -> drop cut 2
    assert list(merge_empty_bands(ev, ex)) == [0]
    assert list(merge_empty_bands(np.array([1.0, 1.0]), np.array([1.0, 0.0]))) == []
    assert list(merge_empty_bands(np.array([1.0, 1.0, 1.0]), np.ones(3))) == [0, 1]


def test_no_churn_at_all_is_refused():
    t = StartStop([0.0, 0.0], [10.0, 40.0], [0, 0])
    with pytest.raises(ModelError, match="the table has no churns"):
        fit_piecewise(t, cuts=[30])


def test_bad_cuts_are_refused():
    t = _minimum_term()
    for bad in ([60, 30], [0, 30], [30, float("nan")]):
        with pytest.raises(ModelError, match="band cut points must be increasing positive"):
            fit_piecewise(t, cuts=bad)


def test_comparison_carries_the_merge():
    comp = compare_models(_minimum_term(), (), [30, 60])
    assert comp.fits["piecewise"].cuts == (60.0,)
    assert any(w.startswith("piecewise: bands merged") for w in comp.warnings)


def test_fit_page_says_which_bands_merged():
    from retain.publish.pages import fit_page
    from retain.run import RunOptions, run_table

    t = _minimum_term()
    run = run_table(t, RunOptions(piecewise_cuts=(30.0, 60.0)))
    page = fit_page(run)
    bullets = [b for s in page.sections for b in s.bullets]
    assert any("bands merged" in b and "0 to 30 days" in b for b in bullets)


def _project(tmp_path, extra: str):
    text = (DEMO_DIR / "retain.toml").read_text()
    if "[model]" not in text:
        pytest.skip("demo project file has no [model] section")
    p = tmp_path / "retain.toml"
    p.write_text(text.replace("[model]", "[model]\n" + extra, 1).replace(
        'path = "', f'path = "{DEMO_DIR}/', 1))
    return p


@pytest.mark.parametrize("key", ["piecewise_cuts", "decrement_edges"])
def test_day_list_keys(tmp_path, key):
    from retain.data.config import load_config
    from retain.errors import ConfigError

    cfg = load_config(_project(tmp_path, f"{key} = [7, 14, 30.5, 61]"))
    assert getattr(cfg.model, key) == (7.0, 14.0, 30.5, 61.0)
    for bad in ("[30, 10]", "[0, 10]", '["a"]', "[]", "30"):
        with pytest.raises(ConfigError, match=f"{key}: must be a list of increasing positive"):
            load_config(_project(tmp_path, f"{key} = {bad}"))


def test_decrement_edges_reach_the_decrements_page():
    """[model] decrement_edges -> a decrement table on those bands in the run and on the page."""
    from retain.publish.pages import decrements_page
    from retain.run import RunOptions, run_table

    t = _minimum_term()
    run = run_table(t, RunOptions(decrement_edges=(7.0, 30.0, 60.0)))
    dt = run.value("decrements:bands")
    # bands (0,7] (7,30] (30,60]: churns at 40 and 50 fall in (30,60]; 70 is past 60
    assert list(dt.frame["churns"]) == [0.0, 0.0, 2.0]
    page = decrements_page(run)
    keys = [f.key for s in page.sections for f in s.figures]
    assert "decrements-bands" in keys
    assert run_table(t, RunOptions()).get("decrements:bands").kind == "absent"


def test_merged_bands_with_a_covariate_equal_the_fit_on_the_merged_cuts():
    """With a covariate (Newton path) the merged fit is the fit on the cuts that remain."""
    t = StartStop([0.0] * 8, [40, 50, 70, 90, 20, 45, 80, 100], [1, 1, 1, 0, 0, 1, 1, 0],
                  covariates={"x": [0.1, 0.9, 0.4, 0.3, 0.8, 0.5, 0.2, 0.7]})
    merged = fit_piecewise(t, cuts=[30, 60], covariates=["x"])
    direct = fit_piecewise(t, cuts=[60], covariates=["x"])
    assert merged.cuts == direct.cuts == (60.0,) and len(merged.merged_bands) == 1
    np.testing.assert_allclose(merged.params, direct.params, rtol=1e-10)
    np.testing.assert_allclose(merged.cov, direct.cov, rtol=1e-8)
    assert merged.loglik == pytest.approx(direct.loglik, rel=1e-12)

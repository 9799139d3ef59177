"""Hazard ratio by tenure band (term × band Cox refit) against statsmodels PHReg.

Data: scikit-survival's Veterans' Administration lung cancer trial (Kalbfleisch &
Prentice), where the Karnofsky score's effect is known to fade with follow-up time
(a classic non-proportional hazard in the survival literature, from memory); the
Schoenfeld test here rejects it (p about 0.005) and passes treatment.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from retain.data.table import StartStop
from retain.models.cox import fit_cox
from retain.models.tenure_effects import band_labels, hazard_ratio_by_tenure, tenure_effects

sm = pytest.importorskip("statsmodels.duration.hazard_regression")
sksurv = pytest.importorskip("sksurv.datasets")

CUTS = (90.5, 180.5)  # days; between churn days (whole days), so no churn sits on an edge
# (statsmodels counts a row entering at t as at risk at t; this project does not)


@pytest.fixture(scope="module")
def veterans() -> pd.DataFrame:
    X, y = sksurv.load_veterans_lung_cancer()
    return pd.DataFrame({
        "start": 0.0, "stop": y["Survival_in_days"].astype(float),
        "churned": y["Status"].astype(int), "karnofsky": X["Karnofsky_score"].astype(float),
        "celltype": X["Celltype"].astype(str), "treatment": X["Treatment"].astype(str),
        "customer_id": np.arange(len(y))})


@pytest.fixture(scope="module")
def fit(veterans):
    return fit_cox(StartStop.from_frame(veterans), ["karnofsky", "celltype", "treatment"],
                   robust=False)


def _split_by_hand(frame: pd.DataFrame, edges: list[float]) -> pd.DataFrame:
    """Each row cut at the edges; the churn stays on the piece that holds the row's stop."""
    parts = []
    for b, (lo, hi) in enumerate(zip(edges[:-1], edges[1:], strict=True)):
        piece = frame[(frame["start"] < hi) & (frame["stop"] > lo)].copy()
        piece["churned"] = np.where(piece["stop"] <= hi, piece["churned"], 0)
        piece["start"] = piece["start"].clip(lower=lo)
        piece["stop"] = piece["stop"].clip(upper=hi)
        piece["band"] = b
        parts.append(piece)
    return pd.concat(parts, ignore_index=True)


def test_karnofsky_by_band_matches_phreg_with_hand_built_interactions(veterans, fit):
    res = hazard_ratio_by_tenure(fit, "karnofsky", cuts=CUTS)
    edges = [0.0, *CUTS, float(veterans["stop"].max()) + 1.0]
    assert res.edges == pytest.approx(tuple(edges))
    pieces = _split_by_hand(veterans, edges)
    cols = {f"k{b}": pieces["karnofsky"] * (pieces["band"] == b) for b in range(3)}
    for level in ("adeno", "large", "squamous"):  # smallcell is the most common level
        cols[level] = (pieces["celltype"] == level).astype(float)
    cols["test"] = (pieces["treatment"] == "test").astype(float)
    exog = pd.DataFrame(cols)
    ref = sm.PHReg(pieces["stop"], exog, status=pieces["churned"], entry=pieces["start"],
                   ties="efron").fit()
    z = stats.norm.ppf(0.975)
    beta, se = ref.params[:3], ref.bse[:3]
    np.testing.assert_allclose(np.log(res.hazard_ratio[0]), beta, atol=1e-6)
    np.testing.assert_allclose(np.log(res.lower[0]), beta - z * se, atol=1e-6)
    np.testing.assert_allclose(np.log(res.upper[0]), beta + z * se, atol=1e-6)
    # churns per band counted by hand from the split rows
    np.testing.assert_allclose(res.events, pieces.groupby("band")["churned"].sum().to_numpy())
    # the effect fades: protective early, close to 1 later
    assert res.hazard_ratio[0, 0] < 0.97 < res.hazard_ratio[0, 2]
    assert res.bands == ("months 0–2.97", "months 2.97–5.93", "months 5.93+")


def test_split_alone_changes_no_ratio(veterans, fit):
    # cutting (start, stop] rows at fixed tenures leaves every risk set and churn as it was
    edges = [0.0, *CUTS, float(veterans["stop"].max()) + 1.0]
    pieces = _split_by_hand(veterans, edges).drop(columns="band")
    again = fit_cox(StartStop.from_frame(pieces), ["karnofsky", "celltype", "treatment"],
                    reference=fit.reference, robust=False)  # more rows can move the mode
    np.testing.assert_allclose(again.coef, fit.coef, atol=1e-9)


def test_only_failing_terms_are_split(fit):
    ph = fit.proportional_hazards_test()
    out = tenure_effects(fit, ph.table, cuts=CUTS)
    assert out.averaged == ("karnofsky",)
    assert out.held == ("celltype", "treatment")
    assert [e.term for e in out.effects] == ["karnofsky"]
    assert "averaged over tenure: karnofsky" in out.summary()


def test_band_labels_and_empty_bands(fit):
    assert band_labels([0.0, 3 * 30.436875, 12 * 30.436875, 999.0]) == (
        "months 0–3", "months 3–12", "months 12+")
    # a cut past the last churn is dropped: one band fewer
    res = hazard_ratio_by_tenure(fit, "treatment", cuts=(90.0, 5000.0))
    assert len(res.bands) == 2 and res.hazard_ratio.shape == (1, 2)


# --------------------------------------------------------------------------- the demo's page
@pytest.fixture(scope="module")
def demo_site(demo_prepared, tmp_path_factory):
    from retain.data.config import load_config
    from retain.paths import DEMO_DIR
    from retain.publish.pages import site_content
    from retain.publish.site import build_site
    from retain.run import run_config

    run = run_config(load_config(DEMO_DIR / "retain.toml"), prepared=demo_prepared)
    out = tmp_path_factory.mktemp("tenure") / "site"
    build_site(site_content(run, strict=True), out)
    return run, out


def test_demo_hazards_page_shows_each_failing_term_by_tenure(demo_site):
    import html as html_lib

    from retain import step_names

    run, out = demo_site
    ph = run.outcomes[step_names.COX_PH].value.table
    cox = run.outcomes[step_names.COX].value
    # a term fails when its own row (several columns: the term row; one column: that
    # column's row) has p < 0.05, read straight from the test's table
    failing, passing = [], []
    for term, sl in cox.design.terms.items():
        key = term if sl.stop - sl.start > 1 else cox.labels[sl.start]
        p = float(ph.loc[ph["term"] == key, "p_value"].iloc[0])
        (failing if p < 0.05 else passing).append(term)
    assert failing, "the demo has terms that fail the test (global p about 0.004)"
    page = html_lib.unescape((out / "hazards.html").read_text(encoding="utf-8"))
    assert "Hazard ratios that change with tenure" in page
    res = run.outcomes[step_names.COX_TENURE].value
    assert list(res.averaged) == failing and list(res.held) == passing
    for term in failing:
        assert f"{term}: hazard ratio by tenure band" in page
        e = next(e for e in res.effects if e.term == term)
        for i, label in enumerate(e.labels):
            hr = e.hazard_ratio[i]
            assert f"{label}: {hr[0]:.2f} in months 0–3, {hr[1]:.2f} in 3–12, " \
                   f"{hr[2]:.2f} after 12: " in page
    assert "hold at every tenure" in page and all(t in page for t in passing)


def test_trend_words_hand_worked():
    from retain.publish.pages.hazards import _trend

    # log ratios: 0.62 -> -0.478, 0.91 -> -0.094: nearer 1 at the end, same side: fades
    assert _trend(np.array([0.62, 0.78, 0.91])) == "fades"
    # 17.7 -> 2.87, 23.8 -> 3.17: further from 1 by 0.30 (> 0.1): grows
    assert _trend(np.array([17.7, 21.7, 23.8])) == "grows"
    # 0.8 -> -0.223, 1.3 -> +0.262: crosses 1, both beyond 0.05: reverses
    assert _trend(np.array([0.8, 1.0, 1.3])) == "reverses"
    # 0.68 -> -0.386, 0.745 -> -0.294: moves 0.09 (< 0.1): steady
    assert _trend(np.array([0.68, 0.75, 0.745])) == "steady"

"""Missing covariate values: the three rules, the counts they report, and the completeness table.

Sources:
- statsmodels ``PHReg`` (statsmodels.duration.hazard_regression), ties "efron",
  fitted with ``method="newton"`` on exactly the rows that have every value:
  the complete-case Cox model must be that model (coefficients and model SEs
  to 1e-6 relative, the tolerance of tests/test_cox_reference.py).
- scikit-survival's bundled ``whas500`` data (``sksurv.datasets.load_whas500``,
  Hosmer, Lemeshow & May 2008). Blanks are set on fixed rows (every 10th row of
  ``bmi``, every 13th of ``gender``) so the test knows which rows lack a value.
- Dropped counts: a hand-worked table (working in the test).
"""

from __future__ import annotations

import numpy as np
import pytest
from sksurv.datasets import load_whas500
from statsmodels.duration.hazard_regression import PHReg

from retain import StartStop
from retain.data.completeness import missing_by_attribute
from retain.errors import DataError, ModelError
from retain.models import parametric
from retain.models.competing import cause_specific_cox
from retain.models.cox import fit_cox
from retain.models.missing import MISSING_LEVEL, apply_missing_rule

RTOL = 1e-6


@pytest.fixture(scope="module")
def whas_blank():
    """whas500 split at half its follow-up (two rows per patient), with blanks on fixed rows.

    ``bmi`` is time-varying here: blank on the second row of every 10th
    patient only, so complete cases drop one row and keep the first (the
    patient is at risk on (0, cut] only). ``gender`` is blank on both rows of
    every 13th patient.
    """
    X, y = load_whas500()
    time = y["lenfol"].astype(float)
    event = y["fstat"].astype(int)
    n = len(time)
    starts, stops, churn, who, piece = [], [], [], [], []
    for i in range(n):
        cut = float(np.floor(time[i] / 2))
        if cut >= 1:
            starts += [0.0, cut]
            stops += [cut, time[i]]
            churn += [0, event[i]]
            who += [i, i]
            piece += [0, 1]
        else:
            starts.append(0.0)
            stops.append(time[i])
            churn.append(event[i])
            who.append(i)
            piece.append(0)
    who = np.array(who)
    piece = np.array(piece)
    bmi = X["bmi"].astype(float).to_numpy()[who].copy()
    bmi[(who % 10 == 3) & (piece == 1)] = np.nan
    gender = X["gender"].astype(str).to_numpy()[who].astype(object)
    gender[who % 13 == 5] = None
    age = X["age"].astype(float).to_numpy()[who]
    table = StartStop(starts, stops, churn, customer_id=[f"p{i:03d}" for i in who],
                      covariates={"age": age, "bmi": bmi, "gender": gender})
    return table, who, piece


def test_stop_rule_names_the_column_and_the_option(whas_blank):
    table, _, _ = whas_blank
    with pytest.raises(DataError) as err:
        fit_cox(table, ["age", "bmi"])
    msg = err.value.message
    # 50 patients with i % 10 == 3; each has a second row unless cut < 1 (none in whas500)
    assert "covariate 'bmi' is missing on 50 of" in msg
    assert 'missing = "complete_cases"' in msg


def test_complete_case_cox_equals_phreg_on_complete_rows(whas_blank):
    """Complete cases on start-stop rows = PHReg on the kept rows (entry = start + 0.5)."""
    table, who, piece = whas_blank
    fit = fit_cox(table, ["age", "bmi"], missing="complete_cases")
    keep = np.isfinite(table.column("bmi"))
    X = np.column_stack([table.column("age")[keep], table.column("bmi")[keep]])
    # PHReg counts a row at risk at its own entry; whole days: entry + 0.5 gives (start, stop]
    ref = PHReg(table.stop[keep], X, status=table.churned[keep],
                entry=table.start[keep] + 0.5, ties="efron").fit(method="newton")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, ref.bse, rtol=RTOL)
    # the counts: 50 rows, 50 patients (each keeps its first row), churns on the dropped
    # second rows = the events of those 50 patients
    d = fit.missing
    assert d.rows == int((~keep).sum()) == 50
    assert d.customers == 50 and d.customers_lost == 0
    assert d.churns == float(table.churned[~keep].sum())
    assert d.churns == float(load_whas500()[1]["fstat"][np.arange(500) % 10 == 3].sum())
    assert fit.n_rows == table.n_rows - 50
    assert fit.warnings[0].startswith(f"50 of {table.n_rows} rows left out")


def test_complete_case_is_not_the_whole_table(whas_blank):
    """The fit with rows dropped differs from PHReg on every row with bmi filled in by 0.

    Guards the comparison above against a rule that silently keeps the rows.
    """
    table, _, _ = whas_blank
    fit = fit_cox(table, ["age", "bmi"], missing="complete_cases")
    filled = np.nan_to_num(table.column("bmi"))
    X = np.column_stack([table.column("age"), filled])
    ref = PHReg(table.stop, X, status=table.churned, entry=table.start + 0.5,
                ties="efron").fit(method="newton")
    assert abs(fit.coef[1] / ref.params[1] - 1) > 1e-3


def test_missing_level_equals_phreg_with_a_missing_indicator(whas_blank):
    """A "(missing)" level: PHReg with indicator columns gender=1 and gender=missing.

    Numeric bmi still needs complete cases, so its 50 blank rows are dropped too.
    """
    table, who, _ = whas_blank
    fit = fit_cox(table, ["age", "bmi", "gender"], missing="missing_level",
                  reference={"gender": "0"})
    keep = np.isfinite(table.column("bmi"))
    g = table.column("gender").values()[keep]
    X = np.column_stack([table.column("age")[keep], table.column("bmi")[keep],
                         (g == None).astype(float), (g == "1").astype(float)])  # noqa: E711
    ref = PHReg(table.stop[keep], X, status=table.churned[keep],
                entry=table.start[keep] + 0.5, ties="efron").fit(method="newton")
    assert fit.labels[2:] == (f"gender {MISSING_LEVEL} vs 0", "gender 1 vs 0")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    assert fit.missing.levels_added == ("gender",)
    assert fit.missing.rows == 50


def test_parametric_and_comparison_use_complete_cases(whas_blank):
    """The Weibull fit on complete cases equals the fit on the table with those rows removed."""
    table, _, _ = whas_blank
    keep = np.isfinite(table.column("bmi"))
    direct = parametric.fit_weibull(table.take(keep), ["age", "bmi"])
    via = parametric.fit_weibull(table, ["age", "bmi"], missing="complete_cases")
    np.testing.assert_allclose(via.params, direct.params, rtol=1e-10)
    assert via.missing.rows == 50 and direct.missing.rows == 0
    comp = parametric.compare_models(table, ["age", "bmi"], [365.0, 730.0],
                                     missing="complete_cases")
    assert all(f.missing.rows == 50 for f in comp.fits.values())
    assert comp.missing.rows == 50 and "50 of" in comp.warnings[0]
    with pytest.raises(DataError, match="'bmi' is missing on 50"):
        parametric.compare_models(table, ["age", "bmi"])


def test_cause_specific_cox_counts_once():
    """Cause-specific Cox: the rule applies once; the dropped churn is counted once.

    Hand case: 6 customers, one row each; x is blank for customer f (a voluntary churn).
    """
    t = StartStop([0.0] * 6, [3.0, 5.0, 7.0, 9.0, 11.0, 13.0], [1, 1, 1, 1, 0, 1],
                  customer_id=list("abcdef"),
                  cause=["voluntary", "involuntary", "voluntary", "involuntary", "",
                         "voluntary"],
                  covariates={"x": [0.1, 0.7, 0.4, 0.2, 0.9, np.nan]})
    cs = cause_specific_cox(t, ["x"], missing="complete_cases")
    assert cs.missing.rows == 1 and cs.missing.churns == 1.0
    assert sum("rows left out" in w for w in cs.warnings) == 1
    assert cs.fits["voluntary"].n_events == 2.0  # a and c; f's churn was dropped


def test_dropped_counts_hand_worked():
    """Counts of apply_missing_rule on a small table.

    customer  rows (start, stop]  churned  x      plan
    a         (0,2] (2,5]         0 1      1, -   A, A
    b         (0,4]               1        -      B
    c         (0,3] (3,6]         0 0      2, 3   -, B
    d         (0,1]               0        4      A
    complete_cases on x: drop a's 2nd row (a churn) and b's row (a churn):
      rows 2, customers 2 (a, b), customers lost 1 (b), churns 2 (weights 1 and 2 -> 3)
    complete_cases on x and plan: also c's 1st row -> rows 3, customers 3, lost 1
    missing_level on x and plan: plan keeps c's row as "(missing)"; x drops 2 rows.
    """
    t = StartStop([0, 2, 0, 0, 3, 0], [2, 5, 4, 3, 6, 1], [0, 1, 1, 0, 0, 0],
                  weight=[1, 1, 2, 1, 1, 1], customer_id=list("aabccd"),
                  covariates={"x": [1, np.nan, np.nan, 2, 3, 4],
                              "plan": ["A", "A", "B", None, "B", "A"]})
    out, rec, kept = apply_missing_rule(t, ["x"], "complete_cases")
    assert (rec.rows, rec.customers, rec.customers_lost, rec.churns) == (2, 2, 1, 3.0)
    assert list(kept) == [0, 3, 4, 5] and out.n_rows == 4
    assert rec.missing_rows == {"x": 2}
    out, rec, _ = apply_missing_rule(t, ["x", "plan"], "complete_cases")
    assert (rec.rows, rec.customers, rec.customers_lost, rec.churns) == (3, 3, 1, 3.0)
    out, rec, kept = apply_missing_rule(t, ["x", "plan"], "missing_level")
    assert (rec.rows, rec.customers, rec.churns) == (2, 2, 3.0)
    assert rec.levels_added == ("plan",)
    assert list(out.column("plan").values()) == ["A", MISSING_LEVEL, "B", "A"]
    # nothing missing: the same table back, nothing counted
    same, rec, _ = apply_missing_rule(t, ["plan"], "complete_cases")
    assert rec.rows == 1
    same, rec, _ = apply_missing_rule(t.take([0, 4, 5]), ["x", "plan"], "stop")
    assert not rec.any and same.n_rows == 3
    with pytest.raises(ModelError, match="unknown rule for missing covariate values 'drop'"):
        apply_missing_rule(t, ["x"], "drop")
    with pytest.raises(DataError, match="every one of the 1 rows"):
        apply_missing_rule(t.take([1]), ["x"], "complete_cases")


def test_missing_by_attribute_hand_worked():
    """Same table as above: x blank on 2 rows (customers a, b), plan on 1 row (customer c)."""
    t = StartStop([0, 2, 0, 0, 3, 0], [2, 5, 4, 3, 6, 1], [0, 1, 1, 0, 0, 0],
                  weight=[1, 1, 2, 1, 1, 1], customer_id=list("aabccd"),
                  covariates={"x": [1, np.nan, np.nan, 2, 3, 4],
                              "plan": ["A", "A", "B", None, "B", "A"],
                              "full": [1, 1, 1, 1, 1, 1]})
    m = missing_by_attribute(t)
    assert m.attributes == ("x", "plan", "full")
    assert m.kinds == ("numeric", "categorical", "numeric")
    assert m.rows == (2, 1, 0) and m.customers == (2, 1, 0)
    assert m.churn_rows == (3.0, 0.0, 0.0)
    assert m.incomplete == ("x", "plan")
    f = m.to_frame()
    assert list(f["rows_missing"]) == [2, 1, 0]
    assert "x: 2 of 6 rows (2 customers)" in m.summary()


def test_project_file_key(tmp_path):
    """[model] missing: accepted values, and a clear error for any other."""
    from retain.data.config import load_config
    from retain.errors import ConfigError
    from retain.paths import DEMO_DIR

    text = (DEMO_DIR / "retain.toml").read_text()
    if "[model]" not in text:
        pytest.skip("demo project file has no [model] section")
    for value, ok in (("complete_cases", True), ("missing_level", True), ("drop", False)):
        p = tmp_path / f"{value}.toml"
        p.write_text(text.replace("[model]", f'[model]\nmissing = "{value}"', 1).replace(
            'path = "', f'path = "{DEMO_DIR}/', 1))
        if ok:
            assert load_config(p).model.missing == value
        else:
            with pytest.raises(ConfigError, match="missing.*'drop' is not allowed"):
                load_config(p)

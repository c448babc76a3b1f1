"""The backtest statistics against scipy, statsmodels and scikit-learn (the committed outputs
tests/reference/binomial_scipy.json and backtest_scipy.json), at the tolerances of the Rust
tests (tests/all/stats_reference.rs, tests/all/backtest_reference.rs): 1e-9 relative, 1e-12
for the Hosmer-Lemeshow statistic, 1e-12 absolute near zero."""

from __future__ import annotations

import hazardline as hl
from conftest import reference, rel_err

REL = 1e-9
UNDERFLOW = 1e-290


def close(got, want, tol=REL, absolute=0.0):
    if abs(want) < UNDERFLOW and abs(got) < UNDERFLOW:
        return True
    return rel_err(got, want) <= tol or abs(got - want) <= absolute


def test_intervals():
    r = reference("binomial_scipy.json")
    n = 0
    for c in r["intervals"]:
        d, m, level = c["d"], c["n"], c["level"]
        for name, f in [
            ("clopper_pearson", hl.clopper_pearson),
            ("jeffreys", hl.jeffreys_interval),
            ("wilson", hl.wilson_interval),
        ]:
            lo, hi = f(d, m, level)
            assert close(lo, c[name]["lo"]) and close(hi, c[name]["hi"]), (name, c, lo, hi)
            n += 2
    assert n > 100, n


def test_tails_and_jeffreys_test():
    r = reference("binomial_scipy.json")
    for c in r["tails"]:
        d, m, p = c["d"], c["n"], c["p"]
        assert close(hl.binomial_upper_tail(d, m, p), c["p_upper"]), c
        assert close(hl.binomial_lower_tail(d, m, p), c["p_lower"]), c
        assert close(hl.jeffreys_p_value(d, m, p), c["p_jeffreys"]), c


def test_hosmer_lemeshow():
    r = reference("binomial_scipy.json")
    for c in r["hosmer_lemeshow"]:
        b = c["buckets"]
        stat, dof, pv = hl.hosmer_lemeshow([x["n"] for x in b], [x["d"] for x in b], [x["p"] for x in b])
        assert close(stat, c["statistic"], 1e-12) and dof == c["dof"] and close(pv, c["p_value"]), (c["id"], stat, pv)


def test_auc_and_delong():
    r = reference("backtest_scipy.json")
    for c in r["auc"]:
        a = hl.auc_delong(c["scores"], [bool(x) for x in c["labels"]])
        assert close(a["auc"], c["auc"], REL, 1e-12), c["id"]
        assert close(a["variance"], c["auc_var"], REL, 1e-12), c["id"]


def test_correlated_default_test():
    r = reference("backtest_scipy.json")
    for c in r["vasicek"]:
        assert close(hl.vasicek_upper_tail(c["d"], c["n"], c["pd"], c["rho"]), c["p_upper"], REL, 1e-12), c["id"]
        assert close(hl.vasicek_lower_tail(c["d"], c["n"], c["pd"], c["rho"]), c["p_lower"], REL, 1e-12), c["id"]


def test_errors_carry_the_tools_messages():
    """A refused input raises HazardlineError (a ValueError) with the core's message, the text
    the command-line tool prints for the same input."""
    import pytest

    with pytest.raises(hl.HazardlineError, match=r"3 defaults out of 2 obligors: defaults cannot exceed obligors"):
        hl.clopper_pearson(3, 2, 0.95)
    with pytest.raises(ValueError, match=r"confidence level 1.5 must lie strictly between 0 and 1"):
        hl.jeffreys_interval(1, 10, 1.5)
    with pytest.raises(hl.HazardlineError, match=r'tenor "5X" is not understood'):
        hl.Contract.standard("2024-03-19", "5X")
    with pytest.raises(hl.HazardlineError, match=r"tenor 1M is not a whole number of quarters"):
        hl.Contract.standard("2024-03-19", "1M")
    with pytest.raises(hl.HazardlineError, match=r"recovery 1.2 is not valid"):
        hl.price_legs(hl.Contract.standard("2024-03-19", "5Y"), 1.2, hl.DiscountCurve.flat("2024-03-19", 0.03), hl.HazardCurve.flat("2024-03-19", 0.01))
    with pytest.raises(hl.HazardlineError, match=r"curve 2024-03-19 Alder Works USD: quotes 0 and 1 have the same maturity"):
        hl.bootstrap(
            {"date": ["2024-03-19"] * 2, "entity": ["Alder Works"] * 2, "tenor": ["5Y", "5Y"], "par_spread_bp": [100.0, 110.0]},
            hl.DiscountCurve.flat("2024-03-19", 0.03),
        )

"""The contract and the bootstrap against QuantLib, at the tolerances of the Rust tests
(tests/all/reference_quantlib.rs), through the Python package.

Sources: tests/reference/cds_quantlib.json and cds_accrual_quantlib.json (QuantLib's
IsdaCdsEngine from PyPI, scripts beside them); the published upfront table of QuantLib's test
suite (lballabio/QuantLib, test-suite/creditdefaultswap.cpp, test case testIsdaEngine, its
expected upfronts, tolerance 1e-8 relative); tests/reference/cir_bond_quantlib.json (CIR
survival, A and B).
"""

from __future__ import annotations

import hazardline as hl
import pytest
from conftest import reference, rel_err

MODES = ("published", "exact", "standard")


def _cases():
    return {c["id"]: c for c in reference("cds_quantlib.json")["cases"]}


def _discount(case):
    pillars = [p["tenor"] for p in case["discount"]]
    rates = [p["zero_rate"] for p in case["discount"]]
    return hl.DiscountCurve.from_zero_rates(case["trade_date"], pillars, rates)


@pytest.mark.parametrize("mode", MODES)
def test_accrual_variants_match_quantlib(mode):
    """Each accrual variant against the engine with the matching options: survival to 1e-10,
    legs and upfronts to 1e-12 (absolute), every case bootstrapped with that variant."""
    cases = _cases()
    worst = {}
    checked = 0
    for expected in reference("cds_accrual_quantlib.json")["cases"][mode]:
        case = cases[expected["id"]]
        discount = _discount(case)
        quotes = {
            "date": [case["trade_date"]] * len(case["quotes"]),
            "tenor": [q["tenor"] for q in case["quotes"]],
            "par_spread_bp": [q["par_spread_bp"] for q in case["quotes"]],
            "recovery": [case["recovery"]] * len(case["quotes"]),
        }
        nodes = hl.bootstrap(quotes, discount, accrual=mode, infeasible="fail").to_pylist()
        usable = [n for n in nodes if n["status"] in ("ok", "floored")]
        if not usable:
            continue
        curve = hl.curve_from_nodes(case["trade_date"], [n["node_date"] for n in usable], [n["hazard"] for n in usable])
        by_tenor = {n["tenor"]: n for n in nodes}
        for t in expected["tenors"]:
            node = by_tenor[t["tenor"]]
            if node["status"] != "ok":
                continue
            contract = hl.Contract.with_maturity(case["trade_date"], node["maturity"])
            legs = hl.price_legs(contract, case["recovery"], discount, curve, mode)
            for what, got, want, tol in [
                ("survival", node["survival"], t["survival"], 1e-10),
                ("protection", legs.protection, t["protection_leg"], 1e-12),
                ("premium", legs.premium01 + legs.accrual_on_default01, t["premium_leg_per_unit_coupon"], 1e-12),
                ("upfront 100 bp", legs.upfront(0.01), t["upfront_100bp"], 1e-12),
                ("upfront 500 bp", legs.upfront(0.05), t["upfront_500bp"], 1e-12),
            ]:
                diff = abs(got - want)
                assert diff <= tol, f"{mode} {case['id']} {t['tenor']} {what}: {got} vs QuantLib {want} ({diff:.1e})"
                worst[what] = max(worst.get(what, 0.0), diff)
            checked += 1
    assert checked > 200, checked
    print(mode, {k: f"{v:.1e}" for k, v in worst.items()})


def test_bootstrap_matches_quantlib_hazards():
    """Hazards within 1e-11 and survival within 1e-12 of QuantLib's bootstrap, with the
    maturities and node dates equal (the `standard` variant these cases were made with)."""
    n = 0
    for case in reference("cds_quantlib.json")["cases"]:
        quotes = {
            "date": [case["trade_date"]] * len(case["quotes"]),
            "tenor": [q["tenor"] for q in case["quotes"]],
            "par_spread_bp": [q["par_spread_bp"] for q in case["quotes"]],
            "recovery": [case["recovery"]] * len(case["quotes"]),
        }
        nodes = {r["tenor"]: r for r in hl.bootstrap(quotes, _discount(case), accrual="standard", infeasible="fail").to_pylist()}
        for e in case["expected"]["tenors"]:
            node = nodes[e["tenor"]]
            if node["status"] != "ok":
                continue
            assert node["maturity"].isoformat() == e["maturity"], (case["id"], e["tenor"])
            assert node["node_date"].isoformat() == e["node"], (case["id"], e["tenor"])
            assert abs(node["survival"] - e["survival"]) < 1e-12, (case["id"], e["tenor"])
            assert abs(node["hazard"] - e["hazard"]) < 1e-11, (case["id"], e["tenor"])
            n += 1
    assert n > 200, n


def test_published_upfront_table():
    """The 20 published upfronts (lballabio/QuantLib, test-suite/creditdefaultswap.cpp,
    testIsdaEngine) within their own tolerance, 1e-8 relative: a contract to each term date at a
    100 bp coupon, quoted at the case's spread, on the discount curve QuantLib builds from that
    test's rates (pillars written by tests/reference/cds_accrual_quantlib.py), notional 1e7."""
    t = reference("cds_accrual_quantlib.json")["published_table"]
    pillars = t["discount_pillars"]
    discount = hl.DiscountCurve.from_discount_factors(t["trade_date"], [p[0] for p in pillars[1:]], [p[1] for p in pillars[1:]])
    worst = 0.0
    for c in t["cases"]:
        contract = hl.Contract.with_maturity(t["trade_date"], c["term_date"])
        upfront = hl.spread_to_upfront(contract, c["quoted_spread"], 0.01, c["recovery"], discount)
        miss = rel_err(upfront * 1e7, c["published_upfront"])
        assert miss <= t["tolerance_relative"], (c, upfront * 1e7)
        back = hl.upfront_to_spread(contract, upfront, 0.01, c["recovery"], discount)
        assert abs(back - c["quoted_spread"]) < 1e-12 * max(1.0, c["quoted_spread"])
        worst = max(worst, miss)
    assert len(t["cases"]) == 20
    print(f"published upfront table: largest relative miss {worst:.2e}")


def test_cs01_is_the_risky_annuity_per_bp():
    """CS01 of a standard 5Y contract whose coupon equals its quoted spread: its risky annuity
    x 1 bp, within 1% (common practice, no single source: d upfront / d spread = annuity +
    (spread - coupon) d annuity / d spread, and the second term vanishes at spread = coupon)."""
    case = next(iter(_cases().values()))
    d = _discount(case)
    c = hl.Contract.standard(case["trade_date"], "5Y")
    for spread in (0.005, 0.01, 0.03):
        h = hl.flat_hazard_of_spread(c, spread, 0.4, d)
        annuity = hl.price_legs(c, 0.4, d, hl.HazardCurve.flat(case["trade_date"], h)).risky_annuity
        cs = hl.cs01(c, spread, spread, 0.4, d)
        assert abs(cs / (annuity * 1e-4) - 1.0) < 0.01, (spread, cs, annuity)


def test_cir_survival_matches_the_reference():
    """CIR survival within 1e-10 of tests/reference/cir_bond_quantlib.json (the closed form
    evaluated there in high precision; the same tolerance as tests/all/cir.rs)."""
    n = 0
    for case in reference("cir_bond_quantlib.json")["cir"]:
        times = [p["t"] for p in case["points"]]
        got = hl.cir_survival(case["kappa"], case["theta"], case["sigma"], case["lambda0"], times)
        for g, p in zip(got, case["points"]):
            assert abs(g - p["survival"]) < 1e-10, (case["id"], p["t"], g, p["survival"])
            n += 1
    assert n >= 20, n


def test_cir_fit_recovers_its_parameters():
    """Quotes made from known CIR parameters are fitted back (a fit of exact model spreads
    must return the parameters that made them; the tool's own check, tests/all/cir.rs)."""
    d = hl.DiscountCurve.flat("2024-03-19", 0.03)
    tenors = ["6M", "1Y", "2Y", "3Y", "4Y", "5Y", "7Y", "10Y"]
    truth = (0.4, 0.025, 0.08, 0.012)
    spreads = [s * 1e4 for s in hl.cir_par_spreads("2024-03-19", tenors, 0.4, d, *truth)]
    fit = hl.fit_cir("2024-03-19", tenors, spreads, d)
    assert fit["status"] == "ok"
    assert fit["rmse_bp"] < 1e-4
    for name, want in zip(("kappa", "theta", "sigma", "lambda0"), truth):
        assert abs(fit[name] - want) < 1e-4 * max(1.0, want * 100), (name, fit[name], want)
    held = hl.fit_cir("2024-03-19", tenors, spreads, d, kappa=truth[0], sigma=truth[2])
    assert held["mode"] == "fixed_kappa_sigma" and abs(held["theta"] - truth[1]) < 1e-6

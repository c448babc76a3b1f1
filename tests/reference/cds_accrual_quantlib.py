#!/usr/bin/env python3
"""Reference values for every accrual-on-default variant, and the published upfront table.

Why this exists: hazardline prices accrual on default three ways (docs/design.md):
  * `published` (the default): the standard model as QuantLib's IsdaCdsEngine prices it with
    its default options, NumericalFix.Taylor, AccrualBias.HalfDayBias,
    ForwardsInCouponPeriod.Piecewise (the half-day term, and the integral split at every node
    of both curves inside a coupon period);
  * `exact`: Taylor, NoBias, Piecewise (split at the nodes, no half-day term);
  * `standard`: Taylor, NoBias, Flat (one interval per coupon period, no half-day term).
This script reruns the invented cases of tests/reference/cds_quantlib.py (same discount
curves, quotes, schedules and single-coupon handling; see that script) under each option set,
bootstrapping each curve with that engine, and records per tenor the survival, hazard, legs,
upfronts and par spread.

It also reproduces a published table: the upfronts of QuantLib's test suite,
lballabio/QuantLib, test-suite/creditdefaultswap.cpp, test case `testIsdaEngine` (values
the test's array of expected upfronts, which that test compares at a tolerance of 1e-6 percent, i.e. 1e-8 relative).
Trade date 2009-05-21; the discount curve is built by QuantLib from the deposit and swap rates
in that test (deposits 1M..12M Act/360, spot lag 2, Modified Following; semi-annual 30/360 swaps
against a 3M Act/360 index; WeekendsOnly; log-linear discount factors on Act/365F); a flat
hazard is implied from each quoted spread (0.001 or 0.1) by QuantLib's impliedHazardRate with
the ISDA model, and the fair upfront of a 100 bp contract to each of five maturities at
recoveries 0.2 and 0.4, times the notional 1e7, is the published value. The curve's pillar dates
and discount factors are written here so the Rust test can rebuild the same curve.

Run: python3 tests/reference/cds_accrual_quantlib.py (QuantLib==1.44, scipy from PyPI).
"""

import json
import os
import sys

import QuantLib as ql

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import cds_quantlib as base  # noqa: E402

OUT_PATH = os.path.join(os.path.dirname(os.path.abspath(__file__)), "cds_accrual_quantlib.json")

E = ql.IsdaCdsEngine
MODES = {
    "published": (E.Taylor, E.HalfDayBias, E.Piecewise),
    "exact": (E.Taylor, E.NoBias, E.Piecewise),
    "standard": (E.Taylor, E.NoBias, E.Flat),
}

# QuantLib test-suite/creditdefaultswap.cpp, testIsdaEngine.
PUBLISHED = {
    "source": "lballabio/QuantLib, test-suite/creditdefaultswap.cpp, test case testIsdaEngine (its expected upfronts)",
    "tolerance_relative": 1e-8,
    "trade_date": "2009-05-21",
    "deposits": {"tenors_months": [1, 2, 3, 6, 9, 12],
                 "rates": [0.003081, 0.005525, 0.007163, 0.012413, 0.014, 0.015488]},
    "swaps": {"tenors_years": [2, 3, 4, 5, 6, 7, 8, 9, 10, 12, 15, 20, 25, 30],
              "rates": [0.011907, 0.01699, 0.021198, 0.02444, 0.026937, 0.028967, 0.030504,
                        0.031719, 0.03279, 0.034535, 0.036217, 0.036981, 0.037246, 0.037605]},
    "term_dates": ["2010-06-20", "2011-06-20", "2012-06-20", "2016-06-20", "2019-06-20"],
    "spreads": [0.001, 0.1],
    "recoveries": [0.2, 0.4],
    "values": [-97798.29358, -97776.11889, 914971.5977, 894985.6298,
               -186921.3594, -186839.8148, 1646623.672, 1579803.626,
               -274298.9203, -274122.4725, 2279730.93, 2147972.527,
               -592420.2297, -591571.2294, 3993550.206, 3545843.418,
               -797501.1422, -795915.9787, 4702034.688, 4042340.999],
}


def mode_cases():
    out = {}
    for mode, options in MODES.items():
        base.ENGINE_OPTIONS = options
        rows = []
        for case in base.CASES:
            trade = base.qdate(case["trade_date"])
            ql.Settings.instance().evaluationDate = trade
            disc, dates, factors = base.build_discount_curve(trade, case["discount"])
            dh = ql.YieldTermStructureHandle(disc)
            tenors, hazards, credit, infeasible, _ = base.bootstrap(trade, case["quotes"], dh, case["recovery"])
            curve = credit.currentLink()
            per = []
            for ten, h in zip(tenors, hazards):
                per.append({
                    "tenor": ten.tenor,
                    "hazard": h,
                    "survival": curve.survivalProbability(ten.maturity),
                    "par_spread_bp_repriced": 1e4 * ten.cds100.fairSpread(),
                    "upfront_100bp": ten.cds100.fairUpfront(),
                    "upfront_500bp": ten.cds500.fairUpfront(),
                    "protection_leg": ten.cds_unit.defaultLegNPV(),
                    "premium_leg_per_unit_coupon": -ten.cds_unit.couponLegNPV(),
                })
            row = {"id": case["id"], "tenors": per}
            if infeasible is not None:
                row["infeasible_tenor"] = infeasible.tenor
            rows.append(row)
        out[mode] = rows
    base.ENGINE_OPTIONS = MODES["standard"]
    return out


def published_discount_curve():
    """The published table's discount curve: QuantLib's rate helpers on the test's deposit and
    swap rates (evaluation date 2009-05-21, set here); returns the curve and its handle."""
    trade = ql.Date(21, 5, 2009)
    ql.Settings.instance().evaluationDate = trade
    helpers = []
    for m, r in zip(PUBLISHED["deposits"]["tenors_months"], PUBLISHED["deposits"]["rates"]):
        helpers.append(ql.DepositRateHelper(r, ql.Period(m, ql.Months), 2, ql.WeekendsOnly(),
                                            ql.ModifiedFollowing, False, ql.Actual360()))
    index = ql.IborIndex("IsdaIbor", ql.Period(3, ql.Months), 2, ql.USDCurrency(), ql.WeekendsOnly(),
                         ql.ModifiedFollowing, False, ql.Actual360())
    for y, r in zip(PUBLISHED["swaps"]["tenors_years"], PUBLISHED["swaps"]["rates"]):
        helpers.append(ql.SwapRateHelper(r, ql.Period(y, ql.Years), ql.WeekendsOnly(), ql.Semiannual,
                                         ql.ModifiedFollowing, ql.Thirty360(ql.Thirty360.BondBasis), index))
    curve = ql.PiecewiseLogLinearDiscount(0, ql.WeekendsOnly(), helpers, ql.Actual365Fixed())
    curve.enableExtrapolation()
    return curve, ql.YieldTermStructureHandle(curve)


def published_table():
    curve, dh = published_discount_curve()
    pillars = [(base.iso(d), df) for d, df in zip(curve.dates(), [curve.discount(d) for d in curve.dates()])]
    ph = ql.RelinkableDefaultProbabilityTermStructureHandle()
    rows = []
    k = 0
    for td in PUBLISHED["term_dates"]:
        term = base.qdate(td)
        for spread in PUBLISHED["spreads"]:
            for recovery in PUBLISHED["recoveries"]:
                # Python's MakeCreditDefaultSwap returns the swap, of unit notional: the
                # published values are per 1e7 of notional, so the upfront is scaled below.
                quoted = ql.MakeCreditDefaultSwap(term, spread)
                h = quoted.impliedHazardRate(0.0, dh, ql.Actual365Fixed(), recovery, 1e-10,
                                             ql.CreditDefaultSwap.ISDA)
                ph.linkTo(ql.FlatHazardRate(0, ql.WeekendsOnly(), ql.QuoteHandle(ql.SimpleQuote(h)), ql.Actual365Fixed()))
                engine = ql.IsdaCdsEngine(ph, recovery, dh, False, E.Taylor, E.HalfDayBias, E.Piecewise)
                trade = ql.MakeCreditDefaultSwap(term, 0.01)
                trade.setPricingEngine(engine)
                value = 1e7 * trade.notional() * trade.fairUpfront()
                published = PUBLISHED["values"][k]
                assert abs(value - published) <= 1e-8 * abs(published), (td, spread, recovery, value, published)
                rows.append({"term_date": td, "quoted_spread": spread, "recovery": recovery,
                             "flat_hazard": h, "quantlib_upfront": value, "published_upfront": published})
                k += 1
    return {**PUBLISHED, "discount_pillars": pillars, "cases": rows}


def main():
    doc = {
        "generator": "tests/reference/cds_accrual_quantlib.py",
        "quantlib_version": ql.__version__,
        "modes": {m: f"IsdaCdsEngine options {o}" for m, o in
                  {"published": "Taylor, HalfDayBias, Piecewise", "exact": "Taylor, NoBias, Piecewise",
                   "standard": "Taylor, NoBias, Flat"}.items()},
        "conventions": "as tests/reference/cds_quantlib.json (same cases, schedules and single-coupon handling)",
        "cases": mode_cases(),
        "published_table": published_table(),
    }
    with open(OUT_PATH, "w") as fh:
        fh.write(base.dumps(doc) + "\n")
    print(f"wrote {OUT_PATH}")


if __name__ == "__main__":
    main()

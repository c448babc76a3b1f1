#!/usr/bin/env python3
"""Reference values for CIR survival and fixed-coupon bond prices, computed with QuantLib.

Why this exists: hazardline's CIR survival (src/models/cir.rs) and bond pricer
(src/instruments/bond.rs) must agree with an independent calculator. This script writes
`tests/reference/cir_bond_quantlib.json`, which tests/all/cir.rs and tests/all/bonds.rs compare
against.

* CIR: `ql.CoxIngersollRoss(r0, theta, k, sigma).discountBond(0, t, r0)`, the affine bond price
  of Cox, Ingersoll and Ross (1985), read as a survival probability with the intensity as the
  short rate. QuantLib's constructor enforces the Feller condition, so the Feller-violating sets
  are loaded with `setParams([theta, k, sigma, r0])` on a valid model (the pricing formula does
  not look at the constraint). A(t) and B(t) are recorded too.
* Bonds: `ql.FixedRateBond` (settlement days 0, face 100, unadjusted payments) on a backward
  schedule, priced by `DiscountingBondEngine` on a risky curve built as a `ql.DiscountCurve`
  with nodes on the union of the discount pillars and hazard nodes (plus a date 80 years out),
  whose discount factors are DF(t) x S(t) from a `ql.DiscountCurve` (log-linear) and a
  `ql.HazardRateCurve` (backward flat). Log-linear interpolation of that product is exact,
  since ln DF and ln S are both linear between those nodes.
  - zero recovery: the product DF x S;
  - recovery of market value: DF x S^(1 - R) (a `HazardRateCurve` with hazards x (1 - R));
  - recovery of face value: the zero-recovery dirty price plus 100 R times the integral of
    DF(t) h(t) S(t) dt from 0 to maturity, integrated by `scipy.integrate.quad` segment by
    segment between the curves' nodes on QuantLib's curve objects;
  - the yield of the zero-recovery clean price with `ql.BondFunctions.bondYield` (the bond's
    day count, compounded at its frequency).

All market data below is invented test data.

Rerun:  tests/reference/.venv/bin/python tests/reference/cir_bond_quantlib.py
"""

import json
import math
import os

import QuantLib as ql
from scipy.integrate import quad

HERE = os.path.dirname(os.path.abspath(__file__))
OUT_PATH = os.path.join(HERE, "cir_bond_quantlib.json")

ACT365 = ql.Actual365Fixed()

# ---------------------------------------------------------------------------------------------
# CIR survival.
# ---------------------------------------------------------------------------------------------

CIR_SETS = [
    # id, kappa, theta, sigma, lambda0
    ("moderate", 0.5, 0.03, 0.10, 0.01),
    ("feller_violated_low", 0.2, 0.02, 0.15, 0.005),
    ("feller_violated_high_vol", 1.5, 0.05, 0.50, 0.08),
    ("slow_reversion", 0.05, 0.04, 0.02, 0.02),
    ("zero_start_violated", 0.8, 0.01, 0.30, 0.0),
    ("small_sigma", 0.3, 0.015, 0.01, 0.03),
    ("distressed", 3.0, 0.20, 1.00, 0.50),
    ("inverted", 0.7, 0.01, 0.08, 0.06),
]
CIR_TIMES = [0.1, 0.25, 0.5, 1.0, 2.0, 3.0, 5.0, 7.0, 10.0, 15.0, 20.0, 30.0]


def cir_cases():
    out = []
    for cid, k, th, s, l0 in CIR_SETS:
        m = ql.CoxIngersollRoss(0.01, 0.1, 0.1, 0.1)
        m.setParams(ql.Array([th, k, s, l0]))
        got = list(m.params())
        assert all(abs(a - b) == 0.0 for a, b in zip(got, [th, k, s, l0])), got
        pts = []
        for t in CIR_TIMES:
            p = m.discountBond(0.0, t, l0)
            # A and B from two short rates (discountBond is A exp(-B r)).
            p_hi = m.discountBond(0.0, t, l0 + 0.01)
            b = math.log(p / p_hi) / 0.01
            a = p * math.exp(b * l0)
            pts.append({"t": t, "survival": p, "A": a, "B": b})
        out.append({"id": cid, "kappa": k, "theta": th, "sigma": s, "lambda0": l0,
                    "feller": 2 * k * th >= s * s, "points": pts})
    return out


# ---------------------------------------------------------------------------------------------
# Bonds.
# ---------------------------------------------------------------------------------------------

DISCOUNT_TENORS = ["1M", "3M", "6M", "1Y", "2Y", "3Y", "5Y", "7Y", "10Y", "15Y", "20Y", "30Y"]

DAY_COUNTS = {
    "30/360": lambda sched: ql.Thirty360(ql.Thirty360.BondBasis),
    "ACT/ACT-ICMA": lambda sched: ql.ActualActual(ql.ActualActual.ISMA),
    "ACT/365F": lambda sched: ql.Actual365Fixed(),
    "ACT/360": lambda sched: ql.Actual360(),
}
FREQ = {1: ql.Annual, 2: ql.Semiannual, 4: ql.Quarterly, 12: ql.Monthly}

BOND_CASES = [
    {
        "id": "upward_2024-05-10",
        "trade_date": "2024-05-10",
        "recovery": 0.4,
        "zero_rates": [0.031, 0.0316, 0.0322, 0.0331, 0.0342, 0.0351, 0.0364, 0.0373, 0.0383, 0.0395, 0.0402, 0.041],
        "hazard": [("1Y", 0.010), ("3Y", 0.015), ("5Y", 0.020), ("10Y", 0.025)],
        "bonds": [
            ("sa_30360_eom", 0.05, 2, "2029-08-31", "30/360", None),
            ("an_icma", 0.0325, 1, "2034-03-15", "ACT/ACT-ICMA", "2024-03-15"),
            ("q_icma_stub", 0.06, 4, "2027-06-20", "ACT/ACT-ICMA", "2024-04-02"),
            ("m_act365", 0.045, 12, "2026-11-30", "ACT/365F", None),
            ("sa_act360_20y", 0.0725, 2, "2044-02-15", "ACT/360", None),
            ("zero_coupon", 0.0, 1, "2030-05-10", "ACT/ACT-ICMA", None),
        ],
    },
    {
        "id": "distressed_leap_2024-02-29",
        "trade_date": "2024-02-29",
        "recovery": 0.25,
        "zero_rates": [0.035] * 12,
        "hazard": [("2Y", 0.12), ("5Y", 0.06)],
        "bonds": [
            ("sa_30360", 0.08, 2, "2027-02-28", "30/360", None),
            ("an_icma", 0.09, 1, "2031-02-28", "ACT/ACT-ICMA", None),
            ("coupon_on_settlement", 0.05, 2, "2026-08-29", "30/360", None),
            ("sa_icma_long", 0.07, 2, "2039-08-31", "ACT/ACT-ICMA", "2019-08-31"),
        ],
    },
    {
        "id": "negative_short_low_hazard_2025-09-19",
        "trade_date": "2025-09-19",
        "recovery": 0.6,
        "zero_rates": [-0.005, -0.004, -0.003, -0.001, 0.001, 0.003, 0.006, 0.008, 0.01, 0.012, 0.013, 0.014],
        "hazard": [("3Y", 0.002), ("7Y", 0.004), ("15Y", 0.006)],
        "bonds": [
            ("an_icma_10y", 0.015, 1, "2035-09-19", "ACT/ACT-ICMA", None),
            ("q_act360", 0.02, 4, "2028-12-15", "ACT/360", None),
            ("sa_30360_stub", 0.0275, 2, "2031-01-31", "30/360", "2025-08-05"),
        ],
    },
]


def qdate(text):
    y, m, d = (int(x) for x in text.split("-"))
    return ql.Date(d, m, y)


def iso(d):
    return "%04d-%02d-%02d" % (d.year(), d.month(), d.dayOfMonth())


def period(tenor):
    n, u = int(tenor[:-1]), tenor[-1]
    return ql.Period(n, ql.Months if u == "M" else ql.Years)


def bond_cases():
    out = []
    for case in BOND_CASES:
        T = qdate(case["trade_date"])
        ql.Settings.instance().evaluationDate = T
        R = case["recovery"]
        pillars = [T + period(t) for t in DISCOUNT_TENORS]
        dfs = [1.0] + [math.exp(-z * ACT365.yearFraction(T, d)) for z, d in zip(case["zero_rates"], pillars)]
        disc = ql.DiscountCurve([T] + pillars, dfs, ACT365)
        disc.enableExtrapolation()
        nodes = [T + period(t) for t, _ in case["hazard"]]
        hs = [h for _, h in case["hazard"]]
        hz = ql.HazardRateCurve([T] + nodes, [hs[0]] + hs, ACT365)
        hz.enableExtrapolation()
        hz_mv = ql.HazardRateCurve([T] + nodes, [(1 - R) * h for h in [hs[0]] + hs], ACT365)
        hz_mv.enableExtrapolation()
        far = T + ql.Period(80, ql.Years)
        union = sorted(set([T] + pillars + nodes + [far]))

        def combined(h):
            c = ql.DiscountCurve(union, [disc.discount(d) * h.survivalProbability(d) for d in union], ACT365)
            c.enableExtrapolation()
            return ql.YieldTermStructureHandle(c)

        risky = combined(hz)
        risky_mv = combined(hz_mv)
        riskfree = ql.YieldTermStructureHandle(disc)
        breaks = sorted(set(ACT365.yearFraction(T, d) for d in pillars + nodes))

        rows = []
        for bid, cpn, freq, mat, dcname, issue in case["bonds"]:
            M = qdate(mat)
            months = 12 // freq
            if issue is None:
                k = 1
                while M - ql.Period(months * k, ql.Months) > T:
                    k += 1
                effective = M - ql.Period(months * k, ql.Months)
            else:
                effective = qdate(issue)
            sched = ql.Schedule(effective, M, ql.Period(months, ql.Months), ql.NullCalendar(), ql.Unadjusted,
                                ql.Unadjusted, ql.DateGeneration.Backward, False)
            dc = DAY_COUNTS[dcname](sched)
            bond = ql.FixedRateBond(0, 100.0, sched, [cpn], dc, ql.Unadjusted, 100.0, effective)
            assert bond.settlementDate() == T

            def price_on(h):
                bond.setPricingEngine(ql.DiscountingBondEngine(h))
                return bond.cleanPrice(), bond.dirtyPrice()

            rf_clean, rf_dirty = price_on(riskfree)
            z_clean, z_dirty = price_on(risky)
            mv_clean, mv_dirty = price_on(risky_mv)
            accrued = bond.accruedAmount()
            t_mat = ACT365.yearFraction(T, M)

            def density(t):
                return disc.discount(t, True) * hz.hazardRate(t, True) * hz.survivalProbability(t, True)

            edges = [0.0] + [b for b in breaks if b < t_mat] + [t_mat]
            integral = 0.0
            for a, b in zip(edges[:-1], edges[1:]):
                v, err = quad(density, a, b, epsabs=1e-15, epsrel=1e-13, limit=200)
                assert err < 1e-13, err
                integral += v
            rec = 100.0 * R * integral
            y = ql.BondFunctions.bondYield(bond, ql.BondPrice(z_clean, ql.BondPrice.Clean), dc, ql.Compounded,
                                           FREQ[freq], T, 1e-14, 1000, 0.05)
            coupons = []
            for cf in bond.cashflows():
                c = ql.as_fixed_rate_coupon(cf)
                if c is None or cf.date() <= T:
                    continue
                coupons.append({"accrual_start": iso(c.accrualStartDate()), "accrual_end": iso(c.accrualEndDate()),
                                "payment": iso(c.date()), "amount": c.amount()})
            rows.append({
                "id": bid, "coupon": cpn, "frequency": freq, "maturity": mat, "day_count": dcname,
                "issue_date": issue, "coupons": coupons, "accrued": accrued,
                "risk_free": {"clean": rf_clean, "dirty": rf_dirty},
                "zero": {"clean": z_clean, "dirty": z_dirty},
                "market": {"clean": mv_clean, "dirty": mv_dirty},
                "par": {"clean": z_clean + rec, "dirty": z_dirty + rec, "recovery_value": rec},
                "yield_of_zero_clean": y,
            })
        out.append({
            "id": case["id"], "trade_date": case["trade_date"], "recovery": R,
            "discount": [{"tenor": t, "zero_rate": z} for t, z in zip(DISCOUNT_TENORS, case["zero_rates"])],
            "hazard": [{"node": iso(d), "hazard": h} for d, h in zip(nodes, hs)],
            "bonds": rows,
        })
    return out


def main():
    doc = {
        "generator": "tests/reference/cir_bond_quantlib.py",
        "quantlib_version": ql.__version__,
        "conventions": (
            "CIR: CoxIngersollRoss.discountBond(0, t, lambda0) with params [theta, k, sigma, r0]; "
            "bonds: FixedRateBond(0, 100, Schedule(effective, maturity, 12/f months, NullCalendar, "
            "Unadjusted, Unadjusted, Backward, no EOM), coupon, day count, Unadjusted, 100, effective), "
            "settlement = evaluation date = trade date; risky curve DF x S on the union of nodes; "
            "par recovery = zero-recovery price + 100 R x quad(DF h S)."
        ),
        "cir": cir_cases(),
        "bond_cases": bond_cases(),
    }
    with open(OUT_PATH, "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")
    print("wrote", OUT_PATH)


if __name__ == "__main__":
    main()

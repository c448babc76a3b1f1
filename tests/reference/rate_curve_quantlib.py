#!/usr/bin/env python3
"""Reference values for the standard discount curve built from deposit and swap quotes.

Why this exists: hazardline builds a currency's discount curve from deposit and par swap rates
(crates/hazardline-core/src/curves/rates.rs): spot = T + spot lag business days, instruments
ending spot + tenor Modified Following, deposits on their day count, swaps with the fixed
leg's frequency and day count against a floating leg on the same curve, log-linear discount
factors on Act/365F, pillars at the instruments' end dates. This script builds the same curves
with QuantLib (DepositRateHelper, SwapRateHelper with an IborIndex of the currency's floating
tenor, PiecewiseLogLinearDiscount with reference date T, WeekendsOnly calendar) and writes the
pillar dates and discount factors to `rate_curve_quantlib.json`; the Rust test requires the same
pillar dates and discount factors within 1e-12.

Cases:
  * usd_2009-05-21: the deposit and swap rates of QuantLib's own test suite
    (lballabio/QuantLib, test-suite/creditdefaultswap.cpp, testIsdaEngine), USD conventions;
  * invented rates (no real market data) on other dates for the EUR, GBP and JPY conventions,
    including a month end, a Friday, negative rates, a sparse set of quotes, and a calendar of
    invented holidays (a BespokeCalendar: weekends plus the list) that moves spot, end dates
    and fixed dates.

Conventions per currency (hazardline's defaults; common practice, recalled from memory):
  USD spot 2, deposits Act/360, fixed semi-annual 30/360, floating 3M;
  EUR spot 2, deposits Act/360, fixed annual 30/360, floating 6M;
  GBP spot 0, deposits Act/365F, fixed semi-annual Act/365F, floating 6M;
  JPY spot 2, deposits Act/360, fixed semi-annual Act/365F, floating 6M.

Run: tests/reference/.venv/bin/python tests/reference/rate_curve_quantlib.py (QuantLib==1.44).
"""

import json
import os

import QuantLib as ql

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "rate_curve_quantlib.json")
CAL = ql.WeekendsOnly()
DC = {"ACT/360": ql.Actual360(), "ACT/365F": ql.Actual365Fixed(), "30/360": ql.Thirty360(ql.Thirty360.BondBasis)}
CONV = {
    "USD": {"spot_lag": 2, "deposit_day_count": "ACT/360", "fixed_months": 6, "fixed_day_count": "30/360", "float_months": 3},
    "EUR": {"spot_lag": 2, "deposit_day_count": "ACT/360", "fixed_months": 12, "fixed_day_count": "30/360", "float_months": 6},
    "GBP": {"spot_lag": 0, "deposit_day_count": "ACT/365F", "fixed_months": 6, "fixed_day_count": "ACT/365F", "float_months": 6},
    "JPY": {"spot_lag": 2, "deposit_day_count": "ACT/360", "fixed_months": 6, "fixed_day_count": "ACT/365F", "float_months": 6},
}

CASES = [
    {"id": "usd_2009-05-21", "date": "2009-05-21", "currency": "USD",
     "deposits": [(1, 0.003081), (2, 0.005525), (3, 0.007163), (6, 0.012413), (9, 0.014), (12, 0.015488)],
     "swaps": [(2, 0.011907), (3, 0.01699), (4, 0.021198), (5, 0.02444), (6, 0.026937), (7, 0.028967),
               (8, 0.030504), (9, 0.031719), (10, 0.03279), (12, 0.034535), (15, 0.036217), (20, 0.036981),
               (25, 0.037246), (30, 0.037605)]},
    {"id": "eur_2024-01-31_month_end", "date": "2024-01-31", "currency": "EUR",
     "deposits": [(1, 0.0385), (3, 0.0391), (6, 0.0389), (12, 0.0362)],
     "swaps": [(2, 0.0318), (3, 0.0295), (5, 0.0276), (7, 0.0271), (10, 0.0272), (15, 0.0275), (20, 0.0268), (30, 0.0251)]},
    {"id": "eur_2021-07-26_negative", "date": "2021-07-26", "currency": "EUR",
     "deposits": [(1, -0.0056), (3, -0.00544), (6, -0.00519), (12, -0.00493)],
     "swaps": [(2, -0.00482), (3, -0.00442), (4, -0.00399), (5, -0.00352), (7, -0.00237), (10, -0.00054), (15, 0.00188), (30, 0.00282)]},
    {"id": "gbp_2024-09-20_friday", "date": "2024-09-20", "currency": "GBP",
     "deposits": [(1, 0.0495), (3, 0.0482), (6, 0.0461), (12, 0.0431)],
     "swaps": [(2, 0.0398), (3, 0.0381), (5, 0.0369), (7, 0.0367), (10, 0.0371), (20, 0.0382)]},
    {"id": "jpy_2025-03-19_sparse", "date": "2025-03-19", "currency": "JPY",
     "deposits": [(3, 0.0045), (12, 0.0062)],
     "swaps": [(3, 0.0081), (10, 0.0128)]},
    # An invented holiday list (the currency's calendar): spot moves past two holidays, and
    # holidays fall on instruments' end dates and swap fixed dates.
    {"id": "eur_2024-12-23_holidays", "date": "2024-12-23", "currency": "EUR",
     "holidays": ["2024-12-25", "2024-12-26", "2025-01-01", "2025-01-27", "2025-03-27", "2025-06-27",
                  "2025-12-29", "2026-12-28", "2027-12-27", "2029-12-27"],
     "deposits": [(1, 0.0285), (3, 0.0279), (6, 0.0262), (12, 0.0245)],
     "swaps": [(2, 0.0221), (3, 0.0219), (5, 0.0223), (10, 0.0236)]},
    {"id": "usd_2023-06-30_inverted", "date": "2023-06-30", "currency": "USD",
     "deposits": [(1, 0.0522), (3, 0.0548), (6, 0.0562), (12, 0.0571)],
     "swaps": [(2, 0.0498), (3, 0.0461), (5, 0.0421), (7, 0.0402), (10, 0.0391), (30, 0.0362)]},
]


def qdate(iso):
    y, m, d = map(int, iso.split("-"))
    return ql.Date(d, m, y)


def iso(d):
    return f"{d.year():04d}-{d.month():02d}-{d.dayOfMonth():02d}"


def calendar(case):
    """WeekendsOnly, or weekends plus the case's holidays (a BespokeCalendar)."""
    if not case.get("holidays"):
        return CAL
    cal = ql.BespokeCalendar("case holidays " + case["id"])
    cal.addWeekend(ql.Saturday)
    cal.addWeekend(ql.Sunday)
    for h in case["holidays"]:
        cal.addHoliday(qdate(h))
    return cal


def build(case):
    trade = qdate(case["date"])
    ql.Settings.instance().evaluationDate = trade
    c = CONV[case["currency"]]
    cal = calendar(case)
    helpers = []
    for m, r in case["deposits"]:
        helpers.append(ql.DepositRateHelper(r, ql.Period(m, ql.Months), c["spot_lag"], cal, ql.ModifiedFollowing,
                                            False, DC[c["deposit_day_count"]]))
    index = ql.IborIndex("StandardCurveIndex", ql.Period(c["float_months"], ql.Months), c["spot_lag"],
                         ql.Currency(), cal, ql.ModifiedFollowing, False, ql.Actual360())
    freq = {12: ql.Annual, 6: ql.Semiannual, 3: ql.Quarterly}[c["fixed_months"]]
    for y, r in case["swaps"]:
        helpers.append(ql.SwapRateHelper(r, ql.Period(y, ql.Years), cal, freq, ql.ModifiedFollowing,
                                         DC[c["fixed_day_count"]], index))
    curve = ql.PiecewiseLogLinearDiscount(trade, helpers, ql.Actual365Fixed())
    curve.enableExtrapolation()
    dates = list(curve.dates())
    assert dates[0] == trade
    pillars = [[iso(d), curve.discount(d)] for d in dates[1:]]
    # Probe points between and beyond the pillars.
    probes = [[iso(trade + k), curve.discount(trade + k)] for k in (1, 17, 100, 400, 1000, 3000, 12000)]
    return {"id": case["id"], "date": case["date"], "currency": case["currency"], "convention": c,
            "holidays": case.get("holidays", []),
            "deposits": case["deposits"], "swaps": case["swaps"], "pillars": pillars, "probes": probes}


def main():
    doc = {"generator": "tests/reference/rate_curve_quantlib.py", "quantlib_version": ql.__version__,
           "cases": [build(c) for c in CASES]}
    with open(OUT, "w") as fh:
        json.dump(doc, fh, indent=1)
        fh.write("\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()

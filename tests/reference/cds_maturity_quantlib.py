#!/usr/bin/env python3
"""Reference values for CDS contracts off the standard roll (the `maturity` column).

Why this exists: a `cds_quotes` row may give its contract's maturity; when it differs from the
standard (semi-annual) roll of the row's tenor, hazardline prices the contract to that maturity
(coupons on the quarterly IMM dates from the step-in, the maturity ending the last period: a
short stub when the maturity is not an IMM date). This script prices such contracts with
QuantLib's standard-model engine under its default options (IsdaCdsEngine: Taylor,
HalfDayBias, Piecewise, the tool's default `published` accrual), built by
MakeCreditDefaultSwap(maturity date, coupon) (schedule rule CDS2015, WeekendsOnly, Following,
Act/360 accrual, step-in T + 1, cash settlement T + 3 business days), on the discount curve of
the published upfront table (QuantLib's test suite, test-suite/creditdefaultswap.cpp,
testIsdaEngine: trade date 2009-05-21, deposits and swaps as in tests/reference/
cds_accrual_quantlib.py, whose `published_table.discount_pillars` the Rust test rebuilds the
curve from) and flat hazards of 1%, 5% and 20% a year, recovery 0.4.

Recorded per case: maturity, hazard, the clean upfront at a 100 bp coupon (fairUpfront, per
unit notional, positive when the protection buyer pays) and the par spread (fairSpread).

Run: python3 tests/reference/cds_maturity_quantlib.py (QuantLib==1.44 from PyPI).
"""

import json
import os
import sys

import QuantLib as ql

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import cds_accrual_quantlib as acc  # noqa: E402

OUT_PATH = os.path.join(os.path.dirname(os.path.abspath(__file__)), "cds_maturity_quantlib.json")
E = ql.IsdaCdsEngine

# Off the semi-annual roll for 2009-05-21 (whose standard maturities fall on 20 June): IMM
# dates in March, September and December. (A maturity that is not an IMM date is no standard
# contract: QuantLib's CDS2015 schedule moves it to the next IMM date, and hazardline rejects
# the row as `non_imm_maturity` rather than guess.)
MATURITIES = ["2010-09-20", "2012-03-20", "2013-12-20", "2016-09-20", "2019-03-20"]
HAZARDS = [0.01, 0.05, 0.2]
RECOVERY = 0.4


def main():
    _, dh = acc.published_discount_curve()
    rows = []
    for iso in MATURITIES:
        y, m, d = (int(x) for x in iso.split("-"))
        maturity = ql.Date(d, m, y)
        for h in HAZARDS:
            ph = ql.DefaultProbabilityTermStructureHandle(
                ql.FlatHazardRate(0, ql.WeekendsOnly(), ql.QuoteHandle(ql.SimpleQuote(h)), ql.Actual365Fixed()))
            engine = ql.IsdaCdsEngine(ph, RECOVERY, dh, False, E.Taylor, E.HalfDayBias, E.Piecewise)
            cds = ql.MakeCreditDefaultSwap(maturity, 0.01)
            cds.setPricingEngine(engine)
            schedule = [acc.base.iso(ql.as_coupon(c).date()) for c in cds.coupons()]
            rows.append({"maturity": iso, "hazard": h, "recovery": RECOVERY,
                         "upfront_100bp": cds.fairUpfront(), "par_spread": cds.fairSpread(),
                         "payment_dates": schedule})
    doc = {
        "generator": "tests/reference/cds_maturity_quantlib.py",
        "quantlib_version": ql.__version__,
        "conventions": "trade 2009-05-21; discount curve of the published table (tests/reference/cds_accrual_quantlib.json, published_table.discount_pillars); "
                       "MakeCreditDefaultSwap(maturity, 0.01): CDS2015 schedule from the step-in, WeekendsOnly, Following, Act/360 accrual, "
                       "step-in T + 1, cash settlement T + 3 business days; IsdaCdsEngine(flat hazard, recovery 0.4, discount, "
                       "includeSettlementDateFlows=False, Taylor, HalfDayBias, Piecewise); upfront_100bp = fairUpfront() per unit notional, "
                       "par_spread = fairSpread()",
        "cases": rows,
    }
    with open(OUT_PATH, "w") as f:
        json.dump(doc, f, indent=1)
        f.write("\n")
    print(f"wrote {OUT_PATH}: {len(rows)} cases")


if __name__ == "__main__":
    main()

"""Writes the invented bond tables of the sample (bonds.csv, bond_quotes.csv).

Everything here is invented. Three of the sample's fictional names get a few fixed-coupon
bonds; each day's clean price is the bond priced on that day's sample discount curve and a
hazard read off the name's own CDS quotes (credit triangle at the bond's maturity) plus a
small bond-CDS basis, so the bond-implied curves sit near the CDS curves without matching
them. Recovery of face value, 40%. Rerun with `python3 make_bonds.py` after make_sample.py
(standard library only, deterministic).
"""
import csv, datetime, math, random

random.seed(20240412)
RECOVERY = 0.40

# (bond, entity, currency, coupon, frequency, maturity, day_count, issue_date, basis_bp)
BONDS = [
    ("CVL-4.25-2026", "Corvane Logistics", "USD", 0.0425, 2, "2026-09-15", "30/360", "2021-09-15", 12.0),
    ("CVL-5.00-2029", "Corvane Logistics", "USD", 0.0500, 2, "2029-03-15", "30/360", "2019-03-15", 15.0),
    ("CVL-5.50-2033", "Corvane Logistics", "USD", 0.0550, 2, "2033-06-01", "30/360", "2023-06-01", 18.0),
    ("HBM-6.00-2028", "Halberd Mills", "USD", 0.0600, 2, "2028-11-30", "30/360", "2021-11-30", -10.0),
    ("OST-3.00-2027", "Ostrel Utilities", "EUR", 0.0300, 1, "2027-05-20", "ACT/ACT-ICMA", "2020-05-20", 22.0),
    ("OST-3.50-2031", "Ostrel Utilities", "EUR", 0.0350, 1, "2031-10-20", "ACT/ACT-ICMA", "2021-10-20", 28.0),
]

def date(s):
    return datetime.date.fromisoformat(s)

def years(tenor):
    return int(tenor[:-1]) / (12 if tenor.endswith("M") else 1)

def add_months(d, m):
    y, mo = divmod(d.month - 1 + m, 12)
    y += d.year
    mo += 1
    last = [31, 29 if (y % 4 == 0 and (y % 100 != 0 or y % 400 == 0)) else 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31][mo - 1]
    return datetime.date(y, mo, min(d.day, last))

def yf(a, b):
    return (b - a).days / 365.0

# Discount zero rates per (date, currency): pillars at date + tenor months.
zeros = {}
with open("discount.csv") as f:
    for r in csv.DictReader(f):
        d = date(r["date"])
        months = int(r["tenor"][:-1]) * (1 if r["tenor"].endswith("M") else 12)
        zeros.setdefault((d, r["currency"]), []).append((yf(d, add_months(d, months)), float(r["zero_rate"])))

def log_df(d, ccy, t):
    # Linear in r * t between pillars (log-linear discount factors), flat rate before the first.
    p = sorted(zeros[(d, ccy)])
    if t <= p[0][0]:
        return -p[0][1] * t
    for (t0, r0), (t1, r1) in zip(p, p[1:]):
        if t <= t1:
            w = (t - t0) / (t1 - t0)
            return -((1 - w) * r0 * t0 + w * r1 * t1)
    (t0, r0), (t1, r1) = p[-2], p[-1]
    fwd = (r1 * t1 - r0 * t0) / (t1 - t0)
    return -(r1 * t1 + fwd * (t - t1))

# CDS par spreads per (date, entity): [(years, bp)], faulty rows skipped.
cds = {}
with open("cds_quotes.csv") as f:
    for r in csv.DictReader(f):
        try:
            s = float(r["par_spread_bp"])
            t = years(r["tenor"])
        except ValueError:
            continue
        if s > 0:
            cds.setdefault((date(r["date"]), r["entity"]), []).append((t, s))

def spread_at(d, entity, t):
    pts = sorted(cds[(d, entity)])
    if t <= pts[0][0]:
        return pts[0][1]
    for (t0, s0), (t1, s1) in zip(pts, pts[1:]):
        if t <= t1:
            return s0 + (s1 - s0) * (t - t0) / (t1 - t0)
    return pts[-1][1]

def thirty_360(start, end):
    d1, d2 = min(start.day, 30), end.day
    if d1 == 30 and d2 == 31:
        d2 = 30
    return (360 * (end.year - start.year) + 30 * (end.month - start.month) + d2 - d1) / 360.0

def clean_price(d, bond):
    _, entity, ccy, coupon, freq, mat, dc, issue, basis = bond
    mat, issue = date(mat), date(issue)
    t_mat = yf(d, mat)
    hazard = (spread_at(d, entity, t_mat) + basis) / 1e4 / (1 - RECOVERY)
    step = 12 // freq
    dates = [mat]
    while dates[-1] > d:
        dates.append(add_months(mat, -step * len(dates)))
    dates.reverse()  # dates[0] <= d < dates[1]
    prev, nxt = dates[0], dates[1]
    def frac(a, b, p0, p1):
        # Year fraction of [a, b] inside the regular period [p0, p1].
        if dc == "30/360":
            return thirty_360(a, b)
        return (b - a).days / ((p1 - p0).days * freq)
    pv = 0.0
    for a, b in zip(dates, dates[1:]):
        t = yf(d, b)
        pv += coupon * 100 * frac(a, b, a, b) * math.exp(log_df(d, ccy, t) - hazard * t)
    pv += 100 * math.exp(log_df(d, ccy, t_mat) - hazard * t_mat)
    # Recovery of face at default, on a monthly grid.
    n = max(1, round(t_mat * 12))
    for k in range(n):
        t0, t1 = t_mat * k / n, t_mat * (k + 1) / n
        tm = 0.5 * (t0 + t1)
        pv += RECOVERY * 100 * math.exp(log_df(d, ccy, tm)) * (math.exp(-hazard * t0) - math.exp(-hazard * t1))
    accrued = coupon * 100 * frac(prev, d, prev, nxt)
    return pv - accrued

days = sorted({d for d, _ in cds if (d, "USD") in zeros})
with open("bonds.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["bond", "entity", "currency", "coupon", "frequency", "maturity", "day_count", "issue_date", "seniority"])
    for b in BONDS:
        w.writerow([b[0], b[1], b[2], f"{b[3]:.4f}", b[4], b[5], b[6], b[7], "senior_unsecured"])
with open("bond_quotes.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["date", "bond", "clean_price"])
    for d in days:
        for b in BONDS:
            noise = random.gauss(0, 0.03)  # a few cents of price noise
            w.writerow([d.isoformat(), b[0], f"{clean_price(d, b) + noise:.3f}"])
print(f"wrote {len(BONDS)} bonds, {len(days)} days")

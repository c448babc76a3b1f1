"""Writes the small invented sample that README's first command calibrates.

Everything here is invented: the entities are fictional, the curves are made up to look
like ordinary markets. Rerun with `python3 make_sample.py` (standard library only).
"""
import csv, datetime, math, random

random.seed(20240321)
start = datetime.date(2024, 3, 18)
days = []
d = start
while len(days) < 20:
    if d.weekday() < 5:
        days.append(d)
    d += datetime.timedelta(days=1)

zero_tenors = ["1M", "3M", "6M", "1Y", "2Y", "3Y", "5Y", "7Y", "10Y", "15Y", "30Y"]
def zero(ccy, t_years, k):
    base = {"USD": 0.042, "EUR": 0.028}[ccy]
    slope = {"USD": -0.006, "EUR": 0.004}[ccy]
    return base + slope * (1 - math.exp(-t_years / 4)) + 0.0004 * math.sin(k / 3)

def years(t):
    return int(t[:-1]) / (12 if t.endswith("M") else 1)

with open("discount.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["date", "currency", "tenor", "zero_rate"])
    for k, day in enumerate(days):
        for ccy in ["USD", "EUR"]:
            for t in zero_tenors:
                w.writerow([day.isoformat(), ccy, t, f"{zero(ccy, years(t), k):.6f}"])

# (entity, currency, 5Y level bp, slope, recovery or blank)
names = [
    ("Corvane Logistics", "USD", 85, "up", ""),
    ("Halberd Mills", "USD", 140, "up", ""),
    ("Ostrel Utilities", "EUR", 55, "up", ""),
    ("Vintry Chemicals", "EUR", 260, "flat", ""),
    ("Marrow Bay Shipping", "USD", 1400, "inverted", "0.25"),
]
cds_tenors = ["6M", "1Y", "2Y", "3Y", "4Y", "5Y", "7Y", "10Y"]
shape = {
    "up": [0.35, 0.45, 0.62, 0.78, 0.9, 1.0, 1.12, 1.2],
    "flat": [0.97, 0.98, 0.99, 1.0, 1.0, 1.0, 1.01, 1.01],
    "inverted": [1.9, 1.7, 1.45, 1.25, 1.1, 1.0, 0.92, 0.86],
}
with open("cds_quotes.csv", "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["date", "entity", "currency", "tenor", "par_spread_bp", "recovery", "upfront", "coupon_bp"])
    for k, day in enumerate(days):
        for name, ccy, level, sh, rec in names:
            move = math.exp(0.04 * math.sin(k / 2.5 + len(name)) + random.gauss(0, 0.01))
            for t, m in zip(cds_tenors, shape[sh]):
                w.writerow([day.isoformat(), name, ccy, t, f"{level * m * move:.2f}", rec, "", ""])
    # A few faulty rows, as real exports have them: each is rejected with its reason.
    w.writerow(["2024-03-23", "Corvane Logistics", "USD", "5Y", "86.10", "", "", ""])    # a Saturday
    w.writerow(["2024-03-25", "Halberd Mills", "USD", "5Y", "-140", "", "", ""])         # negative spread
    w.writerow(["2024-03-26", "Ostrel Utilities", "EUR", "5 years", "55", "", "", ""])  # unknown tenor
    w.writerow(["2024-03-27", "Vintry Chemicals", "EUR", "5Y", "n/a", "", "", ""])      # not a number
    w.writerow(["2024-03-28", "Quessel Foods", "GBP", "5Y", "120", "", "", ""])         # no GBP curve
print(f"wrote {len(days)} days")

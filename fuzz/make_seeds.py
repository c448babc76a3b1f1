"""Writes the seed inputs of the `inputs` fuzz target into fuzz/seeds/ (committed): for each
input table a few valid rows as CSV, from the sample fixture and the demo data, and small valid
Parquet files. The first byte of a seed picks the table (0-7, in the target's order) and, with
8 added, Parquet; the rest is the file. Run from the repository root."""

import io
import pathlib

import pyarrow.csv as pacsv
import pyarrow.parquet as pq

TABLES = ["cds_quotes", "discount", "bonds", "bond_quotes", "entities", "grades", "defaults", "cohort_history"]
SOURCES = {
    "cds_quotes": "tests/fixtures/sample/cds_quotes.csv",
    "discount": "tests/fixtures/sample/discount.csv",
    "bonds": "tests/fixtures/sample/bonds.csv",
    "bond_quotes": "tests/fixtures/sample/bond_quotes.csv",
    "entities": "demo-data/entities.csv",
    "grades": "demo-data/grades.csv",
    "defaults": "demo-data/defaults.csv",
    "cohort_history": "demo-data/cohort_history.csv",
}
out = pathlib.Path("fuzz/seeds")
out.mkdir(parents=True, exist_ok=True)
for k, table in enumerate(TABLES):
    lines = pathlib.Path(SOURCES[table]).read_text().splitlines(keepends=True)[:7]
    text = "".join(lines).encode()
    (out / f"{table}.csv.seed").write_bytes(bytes([k]) + text)
    buf = io.BytesIO()
    pq.write_table(pacsv.read_csv(io.BytesIO(text)), buf)
    (out / f"{table}.parquet.seed").write_bytes(bytes([k + 8]) + buf.getvalue())

"""Reads every table of a run with pyarrow (PyPI) and checks the column types that
consumers rely on (docs/design.md, "Output tables"): dates are Parquet dates, numbers are doubles or
64-bit integers, text is text. A large table written as a folder of files
(report.large_tables) is read as one pyarrow dataset. Exits non-zero on any mismatch.

Usage: python3 tests/reference/read_tables_pyarrow.py RUN_DIR/tables
"""
import sys
import pathlib
import pyarrow as pa
import pyarrow.parquet as pq
import pyarrow.dataset as pds

D, F, I, S = pa.date32(), pa.float64(), pa.int64(), pa.string()
EXPECTED = {
    "hazard_curves": {"date": D, "entity": S, "currency": S, "source": S, "tenor": S, "maturity": D,
                      "hazard": F, "survival": F, "status": S},
    "calibration_residuals": {"date": D, "entity": S, "method": S, "instrument": S, "tenor_or_bond": S,
                              "market": F, "model": F, "residual_bp": F},
    "rejects": {"table": S, "source": S, "row": I, "reason": S, "detail": S},
    "flags": {"rule": S, "severity": S, "entity": S, "series": S, "period": S, "date": D, "value": F,
              "threshold": F, "explanation": S},
    "data_quality": {"scope": S, "table": S, "date": D, "rows_read": I, "rows_used": I, "rows_rejected": I},
    "discount_curves": {"date": D, "currency": S, "pillar_date": D, "zero_rate": F, "discount_factor": F},
    "intensity_params": {"date": D, "entity": S, "currency": S, "mode": S, "kappa": F, "theta": F, "sigma": F,
                         "lambda0": F, "rmse_bp": F, "feller": pa.bool_(), "status": S, "iterations": I},
    "cds_bond_basis": {"date": D, "entity": S, "currency": S, "maturity": D, "bond_average_hazard": F,
                       "cds_average_hazard": F, "hazard_basis_bp": F, "bond_par_spread_bp": F,
                       "cds_par_spread_bp": F, "basis_bp": F},
    "backtest_buckets": {"cohort": S, "horizon": I, "bucket": S, "level": F, "n": I, "defaults": I,
                         "realised_rate": F, "implied_pd": F, "cp_lo": F, "cp_hi": F, "jeffreys_lo": F,
                         "jeffreys_hi": F, "wilson_lo": F, "wilson_hi": F, "p_binom_upper": F,
                         "p_binom_lower": F, "p_jeffreys": F, "zone": S},
    "risk_premia": {"bucket": S, "horizon": I, "level": F, "exposure_years": F, "defaults": I, "lambda_p": F,
                    "lambda_p_lo": F, "lambda_p_hi": F, "lambda_q": F, "ratio": F, "ratio_lo": F, "ratio_hi": F,
                    "spread_bp": F, "el_spread_bp": F, "premium_spread_bp": F},
    "stability": {"period": S, "series": S, "scope": S, "key": S, "n": I, "mean": F, "sd": F, "cv": F,
                  "max_abs_move": F, "large_move_share": F, "failures": I, "mean_change": F, "median_change": F},
}

# Tables the bundled demo run leaves out of git (see .gitignore); every other table must exist.
NOT_BUNDLED = {"hazard_curves", "calibration_residuals", "stability", "stability_bands", "residual_curves",
               "cds_bond_basis", "flags", "discount_curves"}

def same(a, b):
    # polars may write large_string; both are text to a consumer.
    if b == S:
        return a in (pa.string(), pa.large_string(), pa.string_view())
    return a == b

def main(folder):
    bad = []
    for name, cols in EXPECTED.items():
        path = pathlib.Path(folder) / f"{name}.parquet"
        files = [path]
        if (pathlib.Path(folder) / name).is_dir():
            path = pathlib.Path(folder) / name
            files = sorted(path.glob("*.parquet"))
            if not files:
                bad.append(f"{name}: an empty folder")
                continue
            table = pds.dataset(path, format="parquet").to_table()
            print(f"{name}: a folder of {len(files)} files")
        elif not path.exists() and name in NOT_BUNDLED:
            print(f"{name}: not in this folder (a large table left out of the bundled demo)")
            continue
        else:
            table = pq.read_table(path)
        for col, typ in cols.items():
            if col not in table.schema.names:
                bad.append(f"{name}: missing column {col}")
            elif not same(table.schema.field(col).type, typ):
                bad.append(f"{name}.{col}: {table.schema.field(col).type}, expected {typ}")
        for f in files:
            meta = pq.read_metadata(f).metadata or {}
            if b"hazardline.version" not in meta:
                bad.append(f"{f.name}: no hazardline.version in the key-value metadata")
        print(f"{name}: {table.num_rows} rows, {len(table.schema.names)} columns")
    if bad:
        print("\n".join(bad))
        sys.exit(1)

if __name__ == "__main__":
    main(sys.argv[1])

//! The bond and CIR fits inside `hazardline run` on the fixture tests/fixtures/sample.toml: the new tables with
//! their schema, bond rows in hazard_curves and calibration_residuals, every CIR fit joined to
//! a bootstrapped CDS curve, and the `[calibration]` keys checked with exact messages.

use super::support::repo;
use assert_cmd::Command;
use hazardline::config::load_pipeline;
use hazardline::run::{run, RunOptions};
use hazardline::tables::readback;
use hazardline::text::{CurveSource, FitMethod};
use std::collections::BTreeSet;

#[test]
fn demo_run_writes_bond_and_cir_tables() {
    let root = tempfile::tempdir().unwrap();
    let cfg = load_pipeline(&repo().join("tests/fixtures/sample.toml")).unwrap();
    assert!(
        cfg.bond_fit && cfg.cir && cfg.cir_mode == hazardline::calibrate::cir::CirFitMode::Free && cfg.cir_window == 20
    );
    let dir = run(&cfg, &RunOptions { out_root: Some(root.path().to_path_buf()), label: None }).unwrap().run_dir;
    let t = dir.join("tables");

    // intensity_params: the design's columns with their types.
    let df = readback::read_frame(&t.join("intensity_params.parquet")).unwrap();
    let schema = df.schema();
    use polars::prelude::DataType;
    for (c, ty) in [
        ("date", DataType::Date),
        ("entity", DataType::String),
        ("currency", DataType::String),
        ("mode", DataType::String),
        ("kappa", DataType::Float64),
        ("theta", DataType::Float64),
        ("sigma", DataType::Float64),
        ("lambda0", DataType::Float64),
        ("rmse_bp", DataType::Float64),
        ("feller", DataType::Boolean),
        ("status", DataType::String),
        ("iterations", DataType::Int64),
    ] {
        assert_eq!(schema.get(c), Some(&ty), "intensity_params.{c}");
    }
    let params =
        hazardline::tables::read_from::<hazardline::tables::IntensityParamRow>(&t.join("intensity_params.parquet"))
            .unwrap();
    let hazard =
        hazardline::tables::read_from::<hazardline::tables::HazardCurveRow>(&t.join("hazard_curves.parquet")).unwrap();
    let cds: BTreeSet<(chrono::NaiveDate, &str, &str)> =
        hazard.iter().filter(|h| h.source == CurveSource::Cds).map(|h| (h.date, &*h.entity, &*h.currency)).collect();
    assert_eq!(params.len(), cds.len(), "one CIR fit per bootstrapped CDS curve");
    for p in &params {
        assert!(
            cds.contains(&(p.date, p.entity.as_str(), p.currency.as_str())),
            "CIR fit {} {} has no CDS curve",
            p.date,
            p.entity
        );
        assert_eq!(p.mode, "free");
        if p.status == hazardline::text::RowStatus::Ok {
            let (k, th, s, l) = (p.kappa.unwrap(), p.theta.unwrap(), p.sigma.unwrap(), p.lambda0.unwrap());
            assert!(k > 0.0 && th > 0.0 && s > 0.0 && l >= 0.0);
            assert_eq!(p.feller, Some(2.0 * k * th >= s * s));
            assert!(p.rmse_bp.unwrap().is_finite());
        }
    }
    // Sorted by (date, entity, currency).
    let keys: Vec<_> = params.iter().map(|p| (p.date, p.entity.clone(), p.currency.clone())).collect();
    let mut sorted = keys.clone();
    sorted.sort();
    assert_eq!(keys, sorted);

    // Bond rows in hazard_curves, with the design's columns.
    let bond: Vec<_> = hazard.iter().filter(|h| h.source == CurveSource::Bond).collect();
    assert!(!bond.is_empty());
    let bond_names: BTreeSet<&str> = bond.iter().map(|h| &*h.entity).collect();
    assert_eq!(bond_names, BTreeSet::from(["Corvane Logistics", "Halberd Mills", "Ostrel Utilities"]));
    for h in &bond {
        let (l, s) = (h.hazard.unwrap(), h.survival.unwrap());
        assert!(l >= 0.0 && s > 0.0 && s <= 1.0 && h.maturity > h.date, "{h:?}");
    }

    // Residual rows of both new methods.
    let res =
        hazardline::tables::read_from::<hazardline::tables::ResidualRow>(&t.join("calibration_residuals.parquet"))
            .unwrap();
    let bond_res: Vec<_> = res.iter().filter(|r| r.method == FitMethod::BondFit).collect();
    let cir_res: Vec<_> = res.iter().filter(|r| r.method == FitMethod::Cir).collect();
    assert_eq!(bond_res.len(), 120, "6 bonds x 20 days");
    assert!(bond_res.iter().all(|r| r.instrument == "bond_price"
        && r.tenor_or_bond.contains('-')
        && r.market > 50.0
        && r.residual_bp.is_finite()));
    // As many bonds as nodes, so the curves reprice the prices.
    assert!(bond_res.iter().all(|r| r.residual_bp.abs() < 1e-6), "bond residuals");
    assert_eq!(
        cir_res.len(),
        res.iter().filter(|r| r.method == FitMethod::Bootstrap).count(),
        "every CDS quote repriced under CIR"
    );

    // The basis where both curves exist, with the design's columns.
    let basis =
        hazardline::tables::read_from::<hazardline::tables::BasisRow>(&t.join("cds_bond_basis.parquet")).unwrap();
    assert_eq!(basis.len(), 120);
    for b in &basis {
        assert!(cds.contains(&(b.date, b.entity.as_str(), b.currency.as_str())));
        assert!((b.basis_bp - (b.cds_par_spread_bp - b.bond_par_spread_bp)).abs() < 1e-9);
        assert!(b.basis_bp.abs() < 60.0, "the sample's basis is a few tens of bp: {b:?}");
    }

    let report = std::fs::read_to_string(dir.join("report.md")).unwrap();
    for s in [
        "### Bond-implied hazard curves",
        "### CIR intensity fit",
        "CDS-bond basis",
        "cir-rmse-history.svg",
        "the CIR intensity fit per CDS curve (free mode)",
    ] {
        assert!(report.contains(s), "report lacks {s}");
    }
}

#[test]
fn fixed_kappa_sigma_mode_holds_kappa_and_sigma_per_window() {
    let dir = tempfile::tempdir().unwrap();
    let sample = repo().join("tests/fixtures/sample");
    let p = dir.path().join("fixed.toml");
    std::fs::write(
        &p,
        format!(
            "[inputs]\ncds_quotes = \"{}\"\ndiscount = \"{}\"\n[calibration]\ncir = true\ncir_mode = \"fixed_kappa_sigma\"\ncir_window = 10\n[report]\noutput_root = \"out\"\nlabel = \"x\"\n",
            sample.join("cds_quotes.csv").display(),
            sample.join("discount.csv").display()
        ),
    )
    .unwrap();
    let cfg = load_pipeline(&p).unwrap();
    assert!(!cfg.bond_fit, "no bond inputs: the bond fit is off by default");
    let run_dir = run(&cfg, &RunOptions::default()).unwrap().run_dir;
    let params = hazardline::tables::read_from::<hazardline::tables::IntensityParamRow>(
        &run_dir.join("tables/intensity_params.parquet"),
    )
    .unwrap();
    assert_eq!(params.len(), 100);
    let name: Vec<_> = params.iter().filter(|p| p.entity == "Vintry Chemicals" && p.kappa.is_some()).collect();
    assert_eq!(name.len(), 20);
    for w in name.chunks(10) {
        assert!(
            w.iter().all(|p| p.mode == "fixed_kappa_sigma" && p.kappa == w[0].kappa && p.sigma == w[0].sigma),
            "kappa and sigma held over a window"
        );
    }
    assert!(hazardline::tables::read_from::<hazardline::tables::BasisRow>(
        &run_dir.join("tables/cds_bond_basis.parquet")
    )
    .unwrap()
    .is_empty());
    let hazard = hazardline::tables::read_from::<hazardline::tables::HazardCurveRow>(
        &run_dir.join("tables/hazard_curves.parquet"),
    )
    .unwrap();
    assert!(hazard.iter().all(|h| h.source == CurveSource::Cds));
}

fn config_error(extra: &str) -> String {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("q.csv"), "date,entity,currency,tenor,par_spread_bp\n").unwrap();
    std::fs::write(dir.path().join("d.csv"), "date,currency,tenor,zero_rate\n").unwrap();
    let p = dir.path().join("p.toml");
    std::fs::write(&p, format!("[inputs]\ncds_quotes = \"q.csv\"\ndiscount = \"d.csv\"\n[calibration]\n{extra}"))
        .unwrap();
    let out = Command::cargo_bin("hazardline").unwrap().arg("run").arg(&p).assert().code(2);
    String::from_utf8(out.get_output().stderr.clone()).unwrap()
}

#[test]
fn calibration_keys_are_checked() {
    // A bad value of a setting with a fixed set of values is refused by the parser, which
    // names the line, shows the key and lists the accepted values.
    let e = config_error("cir_mode = \"loose\"\n");
    assert!(
        e.contains("line 5")
            && e.contains("cir_mode")
            && e.contains("unknown variant `loose`, expected `free` or `fixed_kappa_sigma`"),
        "{e}"
    );
    let e = config_error("bond_recovery_convention = \"face\"\n");
    assert!(
        e.contains("line 5")
            && e.contains("bond_recovery_convention")
            && e.contains("unknown variant `face`, expected one of `par`, `zero`, `market`"),
        "{e}"
    );
    let e = config_error("cir_window = 1\n");
    assert!(e.contains("key `calibration.cir_window`"), "{e}");
    let e = config_error("bond_fit = true\n");
    assert!(e.contains("key `calibration.bond_fit`: the bond fit needs inputs.bonds and inputs.bond_quotes"), "{e}");
    let e = config_error("cir = true\ncds_bootstrap = false\n");
    assert!(e.contains("key `calibration.cir`"), "{e}");
    let e = config_error("cir_modes = \"free\"\n");
    assert!(e.contains("unknown field `cir_modes`") && e.contains("line 5"), "{e}");
    let e = config_error("cir = \"yes\"\n");
    assert!(e.contains("line 5") && e.contains("cir"), "{e}");
}

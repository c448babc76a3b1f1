//! The flag-calibration figures the report's method notes print: each stability rule's
//! false-alarm rate on an invented universe without instabilities and its detection rate on
//! planted ones, as `hazardline flag-rates` (the flag-rates module of the run layer) measures them at the
//! default settings. The test `flag_rates_in_the_method_notes_are_measured` reruns the
//! measurement and compares every figure here.

use std::fmt::Write as _;

/// The stated target: at most this share of entity-periods per rule on the clean universe.
pub const TARGET_AMBER: f64 = 0.05;
/// The stated target for red flags.
pub const TARGET_RED: f64 = 0.01;

/// One rule's figures at the default settings, as the report's method notes print them.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Measured {
    pub rule: &'static str,
    /// Share of the clean universe's entity-periods flagged, in percent (two decimals).
    pub false_alarm_pct: f64,
    /// Planted premium shifts caught (of [`MEASURED_PLANTED`] each kind).
    pub premium_shift: usize,
    /// Planted noisy quarters caught.
    pub noisy_quotes: usize,
}

/// The measurement behind the method notes: `hazardline flag-rates` with its defaults
/// (200 entities x 3 years, 40 instabilities, seed 5) at the default stability settings. The
/// test `flag_rates_in_the_method_notes_are_measured` reruns it and compares every figure.
pub const MEASURED_SPEC: (usize, u32, usize, u64) = (200, 3, 40, 5);
/// Instabilities of each kind in that measurement.
pub const MEASURED_PLANTED: usize = 20;
/// Entity-periods of its clean universe.
pub const MEASURED_ENTITY_PERIODS: usize = 2316;
pub const MEASURED: &[Measured] = &[
    Measured { rule: "calibration_failures", false_alarm_pct: 0.00, premium_shift: 0, noisy_quotes: 0 },
    Measured { rule: "calibration_infeasible", false_alarm_pct: 0.00, premium_shift: 0, noisy_quotes: 2 },
    Measured { rule: "cusum_break", false_alarm_pct: 0.00, premium_shift: 0, noisy_quotes: 0 },
    Measured { rule: "cv_high", false_alarm_pct: 2.68, premium_shift: 11, noisy_quotes: 9 },
    Measured { rule: "large_moves", false_alarm_pct: 2.37, premium_shift: 3, noisy_quotes: 20 },
    Measured { rule: "moves_vs_market", false_alarm_pct: 1.68, premium_shift: 3, noisy_quotes: 17 },
    Measured { rule: "period_change_mean", false_alarm_pct: 1.25, premium_shift: 14, noisy_quotes: 1 },
    Measured { rule: "period_change_median", false_alarm_pct: 1.25, premium_shift: 19, noisy_quotes: 2 },
    Measured { rule: "psi_shift", false_alarm_pct: 0.00, premium_shift: 0, noisy_quotes: 0 },
    Measured { rule: "residual_over_tolerance", false_alarm_pct: 0.39, premium_shift: 0, noisy_quotes: 2 },
];

/// The method-notes paragraph on flag calibration. `differing`: the stability settings of the
/// run that differ from the defaults (then the figures do not describe the run).
pub fn method_note(differing: &[String]) -> String {
    let (entities, years, planted, seed) = MEASURED_SPEC;
    let rates: Vec<String> = MEASURED.iter().map(|m| format!("`{}` {:.2}%", m.rule, m.false_alarm_pct)).collect();
    let caught: Vec<String> = MEASURED
        .iter()
        .filter(|m| m.premium_shift + m.noisy_quotes > 0)
        .map(|m| format!("`{}` {} / {}", m.rule, m.premium_shift, m.noisy_quotes))
        .collect();
    let mut text = format!(
        "- Flag calibration (default thresholds): on an invented universe where no name's model changes (no data faults, no grade migration: each intensity one CIR process with constant parameters; {entities} names x {years} years, seed {seed}, {MEASURED_ENTITY_PERIODS} entity-periods), the share of entity-periods each rule flagged was {}; the target is at most {:.0}% at amber and {:.0}% at red, and no rule raised a red flag. On the same universe with {planted} planted instabilities ({MEASURED_PLANTED} pricing premiums that double and stay, {MEASURED_PLANTED} quarters of quotes ten times noisier than usual), the rules caught (premium shifts / noisy quarters, flagged on the name in the period the instability starts or the next): {}; every one was caught by some rule. Measured by `hazardline flag-rates` (rerun by the tests).",
        rates.join(", "),
        100.0 * TARGET_AMBER,
        100.0 * TARGET_RED,
        caught.join(", ")
    );
    if !differing.is_empty() {
        let _ = write!(
            text,
            " This run's stability settings differ from the defaults ({}), so these figures were not measured for it.",
            differing.join(", ")
        );
    }
    text
}

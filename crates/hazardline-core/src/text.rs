//! Enums with a stable text form: the value a table, the pipeline file and the report write
//! for them. The text is a contract with every reader of the tables, so it is spelled once,
//! beside the variant, by [`text_form!`](crate::text_form), and parsed back through the same
//! list.

/// An enum written as text in tables and settings.
pub trait TextForm: Sized + Copy + 'static {
    /// Every variant, in declaration order.
    const ALL: &'static [Self];
    /// The text written for this variant.
    fn text(self) -> &'static str;
    /// The variant whose text is `s`.
    fn from_text(s: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|v| v.text() == s)
    }
    /// Every variant's text, for messages such as "expected one of ...".
    fn texts() -> Vec<&'static str> {
        Self::ALL.iter().map(|v| v.text()).collect()
    }
}

/// Declares the text form of an enum's variants: implements [`TextForm`] and the inherent
/// `as_str` / `parse` that the code calls.
#[macro_export]
macro_rules! text_form {
    ($ty:ident { $($variant:ident => $text:literal),+ $(,)? }) => {
        impl $crate::text::TextForm for $ty {
            const ALL: &'static [$ty] = &[$($ty::$variant),+];
            fn text(self) -> &'static str {
                match self {
                    $($ty::$variant => $text),+
                }
            }
        }
        impl $ty {
            /// The text written in tables (a stable contract).
            pub fn as_str(self) -> &'static str {
                <$ty as $crate::text::TextForm>::text(self)
            }
            /// The variant written as `s`.
            pub fn parse(s: &str) -> Option<$ty> {
                <$ty as $crate::text::TextForm>::from_text(s)
            }
        }
    };
}

/// Where a hazard curve comes from (`hazard_curves.source`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum CurveSource {
    Cds,
    Bond,
}
text_form!(CurveSource { Cds => "cds", Bond => "bond" });

/// What produced a repriced quote (`calibration_residuals.method`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum FitMethod {
    Bootstrap,
    BondFit,
    Cir,
}
text_form!(FitMethod { Bootstrap => "bootstrap", BondFit => "bond_fit", Cir => "cir" });

/// How serious a flag is (`flags.severity`): red and amber from the review stages, warning and
/// info from the data-quality rules.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Severity {
    Red,
    Amber,
    Warning,
    Info,
}
text_form!(Severity { Red => "red", Amber => "amber", Warning => "warning", Info => "info" });

/// The rule that raised a flag (`flags.rule`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum FlagRule {
    StaleRun,
    Spike,
    FewTenors,
    InvertedCurve,
    CvHigh,
    LargeMoves,
    MovesVsMarket,
    PeriodChangeMean,
    PeriodChangeMedian,
    CalibrationFailures,
    CalibrationInfeasible,
    PsiShift,
    CusumBreak,
    ResidualOverTolerance,
}
text_form!(FlagRule {
    StaleRun => "stale_run",
    Spike => "spike",
    FewTenors => "few_tenors",
    InvertedCurve => "inverted_curve",
    CvHigh => "cv_high",
    LargeMoves => "large_moves",
    MovesVsMarket => "moves_vs_market",
    PeriodChangeMean => "period_change_mean",
    PeriodChangeMedian => "period_change_median",
    CalibrationFailures => "calibration_failures",
    CalibrationInfeasible => "calibration_infeasible",
    PsiShift => "psi_shift",
    CusumBreak => "cusum_break",
    ResidualOverTolerance => "residual_over_tolerance",
});

#[cfg(test)]
mod tests {
    use super::*;

    fn round_trips<T: TextForm + PartialEq + std::fmt::Debug>() {
        let texts = T::texts();
        let distinct: std::collections::BTreeSet<_> = texts.iter().collect();
        assert_eq!(distinct.len(), texts.len(), "texts must differ: {texts:?}");
        for v in T::ALL {
            assert_eq!(T::from_text(v.text()), Some(*v));
        }
        assert_eq!(T::from_text("no such text"), None);
    }

    #[test]
    fn every_text_form_parses_back_to_its_variant() {
        round_trips::<CurveSource>();
        round_trips::<FitMethod>();
        round_trips::<Severity>();
        round_trips::<FlagRule>();
        round_trips::<crate::stats::Zone>();
        round_trips::<crate::calibrate::NodeStatus>();
        round_trips::<crate::calibrate::cir::CirFitStatus>();
        round_trips::<crate::calibrate::cir::CirFitMode>();
        round_trips::<crate::calibrate::bond_fit::BondFitStatus>();
        round_trips::<crate::calibrate::bond_fit::BondCurveForm>();
        round_trips::<crate::stability::BreakStatus>();
        round_trips::<crate::stability::Scope>();
        round_trips::<crate::instruments::bond::RecoveryConvention>();
    }
}

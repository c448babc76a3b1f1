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

/// Declares the text form of an enum's variants: implements [`TextForm`], the inherent
/// `as_str` / `parse` that the code calls, and serde's `Serialize` / `Deserialize` through the
/// same text (so a pipeline file's bad value is refused by the parser, which names the key,
/// the line and the accepted values).
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
        impl ::serde::Serialize for $ty {
            fn serialize<S: ::serde::Serializer>(&self, s: S) -> ::std::result::Result<S::Ok, S::Error> {
                s.serialize_str(self.as_str())
            }
        }
        impl<'de> ::serde::Deserialize<'de> for $ty {
            fn deserialize<D: ::serde::Deserializer<'de>>(d: D) -> ::std::result::Result<$ty, D::Error> {
                const TEXTS: &[&str] = &[$($text),+];
                let s = <::std::string::String as ::serde::Deserialize>::deserialize(d)?;
                $ty::parse(&s).ok_or_else(|| <D::Error as ::serde::de::Error>::unknown_variant(&s, TEXTS))
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

/// The status of a row of `hazard_curves`, `calibration_residuals` or `intensity_params`: the
/// bootstrap's node statuses, the bond fit's and the CIR fit's, in one list.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum RowStatus {
    Ok,
    Floored,
    Infeasible,
    Failed,
    CurveFailed,
    NotCalibrated,
    AtUpperBound,
    MaxIterations,
}
text_form!(RowStatus {
    Ok => "ok",
    Floored => "floored",
    Infeasible => "infeasible",
    Failed => "failed",
    CurveFailed => "curve_failed",
    NotCalibrated => "not_calibrated",
    AtUpperBound => "at_upper_bound",
    MaxIterations => "max_iterations",
});

impl From<crate::calibrate::NodeStatus> for RowStatus {
    fn from(s: crate::calibrate::NodeStatus) -> RowStatus {
        use crate::calibrate::NodeStatus as N;
        match s {
            N::Ok => RowStatus::Ok,
            N::Floored => RowStatus::Floored,
            N::Infeasible => RowStatus::Infeasible,
            N::Failed => RowStatus::Failed,
            N::CurveFailed => RowStatus::CurveFailed,
            N::NotCalibrated => RowStatus::NotCalibrated,
        }
    }
}

impl From<crate::calibrate::bond_fit::BondFitStatus> for RowStatus {
    fn from(s: crate::calibrate::bond_fit::BondFitStatus) -> RowStatus {
        use crate::calibrate::bond_fit::BondFitStatus as B;
        match s {
            B::Ok => RowStatus::Ok,
            B::Floored => RowStatus::Floored,
            B::AtUpperBound => RowStatus::AtUpperBound,
            B::MaxIterations => RowStatus::MaxIterations,
            B::Failed => RowStatus::Failed,
        }
    }
}

impl From<crate::calibrate::cir::CirFitStatus> for RowStatus {
    fn from(s: crate::calibrate::cir::CirFitStatus) -> RowStatus {
        use crate::calibrate::cir::CirFitStatus as F;
        match s {
            F::Ok => RowStatus::Ok,
            F::MaxIterations => RowStatus::MaxIterations,
            F::Failed => RowStatus::Failed,
        }
    }
}

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
        round_trips::<RowStatus>();
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
        round_trips::<crate::calibrate::InfeasiblePolicy>();
        round_trips::<crate::instruments::AccrualIntegration>();
        round_trips::<crate::backtest::CensoringPolicy>();
        round_trips::<crate::backtest::CohortFrequency>();
        round_trips::<crate::stability::CusumLevel>();
    }

    #[test]
    fn every_fit_status_keeps_its_text_as_a_row_status() {
        for s in crate::calibrate::NodeStatus::ALL {
            assert_eq!(RowStatus::from(*s).as_str(), s.as_str());
        }
        for s in crate::calibrate::bond_fit::BondFitStatus::ALL {
            assert_eq!(RowStatus::from(*s).as_str(), s.as_str());
        }
        for s in crate::calibrate::cir::CirFitStatus::ALL {
            assert_eq!(RowStatus::from(*s).as_str(), s.as_str());
        }
    }

    #[test]
    fn serde_reads_and_writes_the_same_text() {
        #[derive(serde::Deserialize, serde::Serialize)]
        struct Holder {
            rule: FlagRule,
        }
        let h: Holder = serde_json_like(r#"{"rule":"psi_shift"}"#);
        assert_eq!(h.rule, FlagRule::PsiShift);
    }

    /// A one-field JSON object parsed without a JSON library (the core has none): enough to
    /// drive the Deserialize impl through serde's value deserializer.
    fn serde_json_like<T: serde::de::DeserializeOwned>(text: &str) -> T {
        use serde::de::value::{MapDeserializer, StrDeserializer};
        let inner = text.trim_matches(|c| c == '{' || c == '}');
        let (k, v) = inner.split_once(':').unwrap();
        let (k, v) = (k.trim_matches('"'), v.trim_matches('"'));
        let map = MapDeserializer::<_, serde::de::value::Error>::new(std::iter::once((
            StrDeserializer::<serde::de::value::Error>::new(k),
            StrDeserializer::<serde::de::value::Error>::new(v),
        )));
        T::deserialize(map).unwrap()
    }
}

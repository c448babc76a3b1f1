//! Traffic-light zone of a bucket from a p-value.
//!
//! The zone is driven by the upper-tail binomial p-value P[D >= d] under the forecast PD: a
//! small value means more defaults than the forecast makes plausible, i.e. the PD is too low,
//! which is the direction a supervisor cares about (Basel Committee working paper 14, 2005,
//! traffic-light approach). Default thresholds 0.05 (yellow) and 0.001 (red) are common
//! practice, no single source; both are parameters.

use super::StatsError;

/// Green: no evidence against the forecast; yellow: some; red: strong.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Zone {
    Green,
    Yellow,
    Red,
}
crate::text_form!(Zone { Green => "green", Yellow => "yellow", Red => "red" });

/// p-value thresholds: yellow when p < `yellow`, red when p < `red` (red < yellow).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ZoneThresholds {
    pub yellow: f64,
    pub red: f64,
}

impl Default for ZoneThresholds {
    fn default() -> Self {
        ZoneThresholds { yellow: 0.05, red: 0.001 }
    }
}

impl ZoneThresholds {
    /// Checks 0 < red < yellow < 1.
    pub fn new(yellow: f64, red: f64) -> Result<ZoneThresholds, StatsError> {
        if red > 0.0 && red < yellow && yellow < 1.0 {
            Ok(ZoneThresholds { yellow, red })
        } else {
            Err(StatsError::BadThresholds { yellow, red })
        }
    }
}

/// The zone of a p-value (normally the upper binomial tail P[D >= d]): red below
/// `thresholds.red`, yellow below `thresholds.yellow`, green otherwise.
pub fn traffic_light(p_value: f64, thresholds: &ZoneThresholds) -> Result<Zone, StatsError> {
    ZoneThresholds::new(thresholds.yellow, thresholds.red)?;
    super::check_probability("p-value", p_value)?;
    Ok(if p_value < thresholds.red {
        Zone::Red
    } else if p_value < thresholds.yellow {
        Zone::Yellow
    } else {
        Zone::Green
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zones_at_and_around_thresholds() {
        let t = ZoneThresholds::default();
        assert_eq!(traffic_light(0.5, &t).unwrap(), Zone::Green);
        assert_eq!(traffic_light(0.05, &t).unwrap(), Zone::Green);
        assert_eq!(traffic_light(0.0499, &t).unwrap(), Zone::Yellow);
        assert_eq!(traffic_light(0.001, &t).unwrap(), Zone::Yellow);
        assert_eq!(traffic_light(1e-80, &t).unwrap(), Zone::Red);
        let strict = ZoneThresholds::new(0.1, 0.01).unwrap();
        assert_eq!(traffic_light(0.05, &strict).unwrap(), Zone::Yellow);
    }

    #[test]
    fn bad_thresholds_and_p_values_are_errors() {
        assert!(ZoneThresholds::new(0.01, 0.05).is_err());
        assert!(ZoneThresholds::new(0.05, 0.0).is_err());
        assert!(traffic_light(0.5, &ZoneThresholds { yellow: 0.01, red: 0.1 }).is_err());
        assert!(traffic_light(f64::NAN, &ZoneThresholds::default()).is_err());
        assert!(traffic_light(1.5, &ZoneThresholds::default()).is_err());
    }
}

//! Risk-free curves for the demo: a two-factor Gaussian (Vasicek) short rate r = x1 + x2 per
//! currency, a slow level factor and a fast slope factor, so that curves steepen and flatten
//! instead of moving in parallel. Zero rates come from the closed-form Vasicek bond price of
//! each independent factor (Vasicek, 1977, J. Financial Economics):
//! P(tau) = exp(A(tau) - B(tau) x), B = (1 - e^{-a tau}) / a,
//! A = (b - s^2 / (2 a^2)) (B - tau) - s^2 B^2 / (4 a).

use super::rng::Rng;

/// One Ornstein-Uhlenbeck factor dx = a (b - x) dt + s dW.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VasicekFactor {
    pub a: f64,
    pub b: f64,
    pub s: f64,
}

impl VasicekFactor {
    /// ln P(tau) contribution of this factor at state x.
    pub fn log_bond(&self, x: f64, tau: f64) -> f64 {
        let bt = (1.0 - (-self.a * tau).exp()) / self.a;
        let at = (self.b - self.s * self.s / (2.0 * self.a * self.a)) * (bt - tau)
            - self.s * self.s * bt * bt / (4.0 * self.a);
        at - bt * x
    }

    /// The exact transition over dt with standard normal z: the OU process is Gaussian.
    pub fn step(&self, x: f64, dt: f64, z: f64) -> f64 {
        let e = (-self.a * dt).exp();
        let sd = self.s * ((1.0 - e * e) / (2.0 * self.a)).sqrt();
        self.b + (x - self.b) * e + sd * z
    }
}

/// The short-rate model of one currency.
#[derive(Debug, Clone, PartialEq)]
pub struct RateModel {
    pub currency: &'static str,
    pub level: VasicekFactor,
    pub slope: VasicekFactor,
}

/// Invented parameters for the demo currencies (levels of a moderate-rate period).
pub fn demo_rate_models() -> Vec<RateModel> {
    vec![
        RateModel {
            currency: "EUR",
            level: VasicekFactor { a: 0.15, b: 0.022, s: 0.006 },
            slope: VasicekFactor { a: 1.2, b: -0.008, s: 0.009 },
        },
        RateModel {
            currency: "USD",
            level: VasicekFactor { a: 0.12, b: 0.032, s: 0.007 },
            slope: VasicekFactor { a: 1.0, b: -0.010, s: 0.011 },
        },
    ]
}

impl RateModel {
    /// Continuously compounded zero rate to `tau` years at state (x1, x2).
    pub fn zero_rate(&self, state: (f64, f64), tau: f64) -> f64 {
        -(self.level.log_bond(state.0, tau) + self.slope.log_bond(state.1, tau)) / tau
    }

    /// Starting state: each factor at its long-run mean.
    pub fn start(&self) -> (f64, f64) {
        (self.level.b, self.slope.b)
    }

    /// Advances the state over `dt` years.
    pub fn step(&self, state: (f64, f64), dt: f64, rng: &mut Rng) -> (f64, f64) {
        (self.level.step(state.0, dt, rng.normal()), self.slope.step(state.1, dt, rng.normal()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_rate_tends_to_the_short_rate_at_short_maturities() {
        let m = &demo_rate_models()[0];
        let st = (0.03, -0.01);
        assert!((m.zero_rate(st, 1e-6) - 0.02).abs() < 1e-6);
    }

    #[test]
    fn vasicek_bond_matches_a_monte_carlo_of_the_factor() {
        // E[exp(-int x dt)] by simulation (exact OU steps, trapezoid integral) against the
        // closed form; a check of the formula's sign conventions, within 4 standard errors.
        let f = VasicekFactor { a: 0.5, b: 0.03, s: 0.02 };
        let (tau, steps, paths) = (2.0, 200, 20_000);
        let dt = tau / steps as f64;
        let mut rng = Rng::new(3);
        let (mut sum, mut sum2) = (0.0, 0.0);
        for _ in 0..paths {
            let mut x = 0.01;
            let mut integral = 0.0;
            for _ in 0..steps {
                let nx = f.step(x, dt, rng.normal());
                integral += 0.5 * (x + nx) * dt;
                x = nx;
            }
            let v = (-integral).exp();
            sum += v;
            sum2 += v * v;
        }
        let mean = sum / paths as f64;
        let se = ((sum2 / paths as f64 - mean * mean) / paths as f64).sqrt();
        let exact = f.log_bond(0.01, tau).exp();
        assert!((mean - exact).abs() < 4.0 * se + 1e-5, "mc {mean} exact {exact} se {se}");
    }
}

//! Funnel-plot limits for a proportion: the band a group's rate stays in, at its sample
//! size, when it shares the pooled rate and only binomial sampling separates them.
//!
//! The limits are the normal approximation to the binomial, p0 +- z sqrt(p0 (1 - p0) / n),
//! multiplied by a scale (sqrt(phi) when a multiplicative overdispersion factor phi
//! widens them) — Spiegelhalter (2005), "Funnel plots for comparing institutional
//! performance", Statistics in Medicine 24:1185-1202, sections 3.1 and 6. They are a
//! reading aid for a chart: the flags of a report come from the analysis of means
//! ([`crate::anom`]), not from these curves.
//!
//! ```
//! use dispar_stats::funnel::Funnel;
//! // 95% limits around a pooled rate of 2% for a group of 1,000 units.
//! let f = Funnel::new(0.02, 0.95, 1.0)?;
//! let band = f.at(1_000.0);
//! assert!((band.lower - 0.011_322_869_547_736).abs() < 1e-14);
//! assert!((band.upper - 0.028_677_130_452_264).abs() < 1e-14);
//! # Ok::<(), dispar_stats::StatsError>(())
//! ```

use crate::error::StatsError;
use crate::interval::{Interval, z_for_confidence};

/// Limits around one pooled rate at one coverage: evaluate them with [`Funnel::at`] for
/// each sample size.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Funnel {
    pooled: f64,
    z: f64,
    scale: f64,
}

impl Funnel {
    /// Limits around `pooled` (in [0, 1]) covering `coverage` (in (0, 1), two-sided:
    /// 0.95 gives z = 1.96) of a group's rates, widened by `scale` (>= 1; 1 for none).
    ///
    /// Errors: `pooled` outside [0, 1], `coverage` outside (0, 1), `scale` below 1 or
    /// not finite ([`StatsError::InvalidParameter`]).
    pub fn new(pooled: f64, coverage: f64, scale: f64) -> Result<Self, StatsError> {
        if !(0.0..=1.0).contains(&pooled) {
            return Err(StatsError::InvalidParameter {
                name: "pooled",
                value: pooled,
                requirement: "between 0 and 1",
            });
        }
        if !(scale.is_finite() && scale >= 1.0) {
            return Err(StatsError::InvalidParameter {
                name: "scale",
                value: scale,
                requirement: "finite and at least 1",
            });
        }
        Ok(Self {
            pooled,
            z: z_for_confidence(coverage)?,
            scale,
        })
    }

    /// The standard normal quantile the limits use: P(|Z| <= z) = coverage.
    pub fn z(&self) -> f64 {
        self.z
    }

    /// The limits for a group of `n` units (n > 0). They are not clipped to [0, 1]: a
    /// chart clips them to its plot. A non-positive `n` gives infinite limits.
    pub fn at(&self, n: f64) -> Interval {
        let half = if n > 0.0 {
            self.z * self.scale * (self.pooled * (1.0 - self.pooled) / n).sqrt()
        } else {
            f64::INFINITY
        };
        Interval {
            lower: self.pooled - half,
            upper: self.pooled + half,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn close(got: f64, want: f64, tol: f64, what: &str) {
        assert!(
            (got - want).abs() <= tol,
            "{what}: got {got:e}, want {want:e} (tolerance {tol:e})"
        );
    }

    #[test]
    fn the_quantiles_match_the_normal_distribution() {
        // scipy.stats.norm.ppf(0.975) = 1.959963984540054 and norm.ppf(0.999) =
        // 3.090232306167813 (recalled from memory); confirmed with mpmath 1.3.0,
        // sqrt(2)*erfinv(2q - 1) at 30 digits: 1.95996398454005423552 and
        // 3.09023230616781354154. Python 3's statistics.NormalDist().inv_cdf gives
        // the same doubles.
        for (coverage, want) in [
            (0.95, 1.959_963_984_540_054),
            (0.998, 3.090_232_306_167_813),
        ] {
            let f = Funnel::new(0.1, coverage, 1.0).expect("valid");
            close(f.z(), want, 2e-15, &format!("z for {coverage}"));
        }
    }

    #[test]
    fn the_limits_match_reference_values() {
        // mpmath 1.3.0 at 30 digits: p0 -+ z sqrt(p0 (1 - p0) / n) with z the exact
        // quantile. 95%, p0 = 0.02, n = 1000: 0.01132286954773613717 and
        // 0.02867713045226386283.
        let band = Funnel::new(0.02, 0.95, 1.0).expect("valid").at(1_000.0);
        close(band.lower, 0.011_322_869_547_736_137, 1e-16, "95% lower");
        close(band.upper, 0.028_677_130_452_263_863, 1e-16, "95% upper");
        // 99.8%, p0 = 0.0137, n = 48210, widened by sqrt(2.25) = 1.5:
        // 0.01124597703882074990 and 0.01615402296117925010.
        let band = Funnel::new(0.0137, 0.998, 1.5).expect("valid").at(48_210.0);
        close(band.lower, 0.011_245_977_038_820_75, 1e-16, "99.8% lower");
        close(band.upper, 0.016_154_022_961_179_25, 1e-16, "99.8% upper");
    }

    #[test]
    fn the_limits_narrow_with_n_and_widen_with_the_scale() {
        let plain = Funnel::new(0.05, 0.95, 1.0).expect("valid");
        let wide = Funnel::new(0.05, 0.95, 2.0).expect("valid");
        let (small, large) = (plain.at(100.0), plain.at(10_000.0));
        assert!(small.upper - small.lower > large.upper - large.lower);
        // Quadrupling n halves the half-width; the scale multiplies it.
        let quarter = plain.at(400.0);
        close(
            (small.upper - 0.05) / (quarter.upper - 0.05),
            2.0,
            1e-12,
            "sqrt(n) law",
        );
        close(
            wide.at(100.0).upper - 0.05,
            2.0 * (small.upper - 0.05),
            1e-15,
            "scale",
        );
        // Symmetric around the pooled rate.
        close(0.05 - small.lower, small.upper - 0.05, 1e-15, "symmetry");
    }

    #[test]
    fn bad_arguments_are_refused() {
        assert!(Funnel::new(1.2, 0.95, 1.0).is_err());
        assert!(Funnel::new(0.1, 1.0, 1.0).is_err());
        assert!(Funnel::new(0.1, 0.95, 0.5).is_err());
        assert!(Funnel::new(0.1, 0.95, f64::NAN).is_err());
        assert!(
            Funnel::new(0.1, 0.95, 1.0)
                .expect("valid")
                .at(0.0)
                .upper
                .is_infinite()
        );
    }
}

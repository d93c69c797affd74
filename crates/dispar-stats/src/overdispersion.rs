//! Overdispersion of performance indicators: Spiegelhalter's multiplicative factor from
//! winsorised z-scores, and the additive random-effects variance.
//!
//! Spiegelhalter (2005), "Handling over-dispersion of performance indicators", Quality and
//! Safety in Health Care 14: phi = (1/k) sum z_w^2 over the k winsorised z-scores; when
//! phi > 1 the control limits are widened by sqrt(phi). The additive alternative estimates
//! tau^2 = (k phi - (k - 1)) / (sum w - sum w^2 / sum w), w_i = 1 / s_i^2 (0 when
//! k phi <= k - 1), in the DerSimonian-Laird style the paper describes.

use crate::error::StatsError;

/// The multiplicative overdispersion estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Overdispersion {
    /// phi = mean of the squared winsorised z-scores.
    pub phi: f64,
    /// Number of z-scores.
    pub k: usize,
    /// Fraction winsorised at each end.
    pub winsor_fraction: f64,
    /// z-scores below this were raised to it.
    pub winsor_low: f64,
    /// z-scores above this were lowered to it.
    pub winsor_high: f64,
    /// Whether overdispersion is present (phi > 1), so that limits are to be widened.
    pub applied: bool,
    /// The factor limits are widened by: sqrt(phi) when applied, else 1.
    pub scale: f64,
}

/// Spiegelhalter's overdispersion factor from z-scores, winsorised at `winsor_fraction`
/// (0.1 in the paper) at each end.
///
/// Winsorising is by count: with k scores, the floor(fraction k) lowest are set to the next
/// lowest value and the floor(fraction k) highest to the next highest (so with k < 10 and
/// fraction 0.1 nothing changes). Errors: no z-scores, a non-finite z-score, or a fraction
/// outside [0, 0.5).
///
/// ```
/// use dispar_stats::overdispersion::spiegelhalter;
/// let o = spiegelhalter(&[0.5, -1.0, 2.0, -0.5], 0.1)?;
/// assert!((o.phi - 1.375).abs() < 1e-15); // (0.25 + 1 + 4 + 0.25) / 4
/// assert!(o.applied);
/// # Ok::<(), dispar_stats::StatsError>(())
/// ```
pub fn spiegelhalter(z: &[f64], winsor_fraction: f64) -> Result<Overdispersion, StatsError> {
    if !(0.0..0.5).contains(&winsor_fraction) {
        return Err(StatsError::InvalidParameter {
            name: "winsor_fraction",
            value: winsor_fraction,
            requirement: "in [0, 0.5)",
        });
    }
    if z.is_empty() {
        return Err(StatsError::InvalidParameter {
            name: "number of z-scores",
            value: 0.0,
            requirement: "at least 1",
        });
    }
    if let Some(&bad) = z.iter().find(|v| !v.is_finite()) {
        return Err(StatsError::InvalidParameter {
            name: "z-score",
            value: bad,
            requirement: "finite",
        });
    }
    let k = z.len();
    let mut sorted = z.to_vec();
    sorted.sort_unstable_by(f64::total_cmp);
    let cut = (winsor_fraction * k as f64).floor() as usize;
    let low = sorted[cut];
    let high = sorted[k - 1 - cut];
    let phi = z
        .iter()
        .map(|&v| {
            let w = v.clamp(low, high);
            w * w
        })
        .sum::<f64>()
        / k as f64;
    let applied = phi > 1.0;
    Ok(Overdispersion {
        phi,
        k,
        winsor_fraction,
        winsor_low: low,
        winsor_high: high,
        applied,
        scale: if applied { phi.sqrt() } else { 1.0 },
    })
}

/// The additive random-effects variance tau^2 from phi and the weights w_i = 1 / s_i^2
/// (Spiegelhalter 2005, DerSimonian-Laird form); 0 when k phi <= k - 1 or the weights
/// are degenerate.
pub fn tau_squared(phi: f64, weights: &[f64]) -> f64 {
    let k = weights.len() as f64;
    let excess = k * phi - (k - 1.0);
    let sw: f64 = weights.iter().sum();
    let sw2: f64 = weights.iter().map(|w| w * w).sum();
    let denom = sw - sw2 / sw;
    if !(excess > 0.0 && denom > 0.0 && denom.is_finite()) {
        return 0.0;
    }
    excess / denom
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_extremes_are_winsorised_by_count() {
        // 10 scores, 10%: the lowest (-9) becomes -1 and the highest (8) becomes 3.
        let z = [-9.0, -1.0, 0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 8.0];
        let o = spiegelhalter(&z, 0.1).expect("valid");
        assert_eq!((o.winsor_low, o.winsor_high), (-1.0, 3.0));
        let want = (1.0 + 1.0 + 0.0 + 0.25 + 1.0 + 2.25 + 4.0 + 6.25 + 9.0 + 9.0) / 10.0;
        assert!((o.phi - want).abs() < 1e-15);
        assert!((o.scale - want.sqrt()).abs() < 1e-15);
    }

    #[test]
    fn no_overdispersion_is_not_applied() {
        let o = spiegelhalter(&[0.1, -0.2, 0.3], 0.1).expect("valid");
        assert!(!o.applied);
        assert_eq!(o.scale, 1.0);
    }

    #[test]
    fn tau_squared_by_hand() {
        // k = 3, phi = 2: excess 6 - 2 = 4; w = 1, 2, 3: 6 - 14/6 = 11/3; tau^2 = 12/11.
        let t = tau_squared(2.0, &[1.0, 2.0, 3.0]);
        assert!((t - 12.0 / 11.0).abs() < 1e-15);
        assert_eq!(tau_squared(0.5, &[1.0, 2.0, 3.0]), 0.0);
    }

    #[test]
    fn bad_input_is_typed() {
        assert!(spiegelhalter(&[], 0.1).is_err());
        assert!(spiegelhalter(&[1.0], 0.5).is_err());
        assert!(spiegelhalter(&[f64::NAN], 0.1).is_err());
    }
}

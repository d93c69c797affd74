//! Multiple-comparison adjustment of p-values: Holm (default), Bonferroni, Hochberg,
//! Benjamini-Hochberg. Definitions as in statsmodels' `multipletests`
//! (`holm`, `bonferroni`, `simes-hochberg`, `fdr_bh`): adjusted values capped at 1 and
//! made monotone in the order of the raw p-values (step-down for Holm, step-up for
//! Hochberg and Benjamini-Hochberg).

/// A multiple-comparison adjustment.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Adjustment {
    /// Holm (1979) step-down: controls the family-wise error rate; uniformly more powerful
    /// than Bonferroni.
    #[default]
    Holm,
    /// Bonferroni: min(1, m p).
    Bonferroni,
    /// Hochberg (1988) step-up: family-wise error rate under independence or positive
    /// dependence.
    Hochberg,
    /// Benjamini-Hochberg (1995) step-up: false discovery rate.
    BenjaminiHochberg,
}

/// Adjusts `p` (one value per hypothesis) for multiple comparisons; the output is in the
/// input's order.
///
/// Values are expected in [0, 1]; a NaN is treated as 1 (never significant) and values
/// outside [0, 1] are clamped. The raw p-values are sorted once (O(m log m)).
///
/// ```
/// use dispar_stats::adjust::{adjust, Adjustment};
/// let adj = adjust(&[0.01, 0.04, 0.03], Adjustment::Holm);
/// // Holm: sorted 0.01*3 = 0.03, 0.03*2 = 0.06, max(0.06, 0.04*1) = 0.06.
/// assert_eq!(adj, vec![0.03, 0.06, 0.06]);
/// ```
pub fn adjust(p: &[f64], method: Adjustment) -> Vec<f64> {
    let m = p.len();
    let clean = |x: f64| -> f64 {
        if x.is_nan() {
            1.0
        } else {
            x.clamp(0.0, 1.0) + 0.0
        }
    };
    let mf = m as f64;
    if method == Adjustment::Bonferroni {
        return p.iter().map(|&x| (clean(x) * mf).min(1.0)).collect();
    }
    // For values in [0, 1] (with -0.0 normalised) the IEEE bit pattern orders like the value.
    let mut order: Vec<(u64, usize)> = p
        .iter()
        .enumerate()
        .map(|(i, &x)| (clean(x).to_bits(), i))
        .collect();
    order.sort_unstable();
    let mut out = vec![0.0; m];
    match method {
        Adjustment::Holm => {
            let mut running = 0.0f64;
            for (rank, &(bits, i)) in order.iter().enumerate() {
                let v = (f64::from_bits(bits) * (m - rank) as f64).min(1.0);
                running = running.max(v);
                out[i] = running;
            }
        }
        Adjustment::Hochberg | Adjustment::BenjaminiHochberg => {
            let mut running = 1.0f64;
            for (rank, &(bits, i)) in order.iter().enumerate().rev() {
                let factor = if method == Adjustment::Hochberg {
                    (m - rank) as f64
                } else {
                    mf / (rank + 1) as f64
                };
                running = running.min((f64::from_bits(bits) * factor).min(1.0));
                out[i] = running;
            }
        }
        Adjustment::Bonferroni => {}
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    const P: [f64; 6] = [0.01, 0.02, 0.03, 0.04, 0.05, 0.5];

    fn close_all(got: &[f64], want: &[f64], what: &str) {
        for (g, w) in got.iter().zip(want) {
            assert!((g - w).abs() < 1e-15, "{what}: {got:?} vs {want:?}");
        }
    }

    // Expected values worked by hand from the definitions (statsmodels multipletests docs):
    #[test]
    fn holm_by_hand() {
        // sorted factors 6,5,4,3,2,1: .06,.10,.12,.12,.10,.5 -> running max .06,.10,.12,.12,.12,.5
        close_all(
            &adjust(&P, Adjustment::Holm),
            &[0.06, 0.10, 0.12, 0.12, 0.12, 0.5],
            "Holm",
        );
    }

    #[test]
    fn hochberg_by_hand() {
        // (m-i+1)p: .06,.10,.12,.12,.10,.5 -> running min from the top: .06,.10,.10,.10,.10,.5
        close_all(
            &adjust(&P, Adjustment::Hochberg),
            &[0.06, 0.10, 0.10, 0.10, 0.10, 0.5],
            "Hochberg",
        );
    }

    #[test]
    fn benjamini_hochberg_by_hand() {
        // (m/i)p: .06,.06,.06,.06,.06,.5
        close_all(
            &adjust(&P, Adjustment::BenjaminiHochberg),
            &[0.06, 0.06, 0.06, 0.06, 0.06, 0.5],
            "BH",
        );
    }

    #[test]
    fn bonferroni_caps_at_one() {
        close_all(
            &adjust(&P, Adjustment::Bonferroni),
            &[0.06, 0.12, 0.18, 0.24, 0.30, 1.0],
            "Bonferroni",
        );
    }

    #[test]
    fn input_order_is_kept_and_nan_counts_as_one() {
        let adj = adjust(&[0.5, f64::NAN, 0.01], Adjustment::Holm);
        assert_eq!(adj, vec![1.0, 1.0, 0.03]);
        assert!(adjust(&[], Adjustment::Holm).is_empty());
    }
}

//! The Faddeeva function w(z) = exp(-z^2) erfc(-iz) in the closed upper half-plane, by
//! Weideman's rational expansion (Weideman 1994, "Computation of the complex error
//! function", SIAM J. Numer. Anal. 31(5), with N = 40 terms). Used for the ANOM integral and
//! for the chi-square upper tail on 1 df, erfc(x) = exp(-x^2) w(ix).

use std::f64::consts::{PI, SQRT_2};
use std::sync::OnceLock;

/// A complex number (only what w needs).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Complex {
    /// Real part.
    pub(crate) re: f64,
    /// Imaginary part.
    pub(crate) im: f64,
}

impl Complex {
    fn mul(self, o: Complex) -> Complex {
        Complex {
            re: self.re * o.re - self.im * o.im,
            im: self.re * o.im + self.im * o.re,
        }
    }
    fn div(self, o: Complex) -> Complex {
        let d = o.re * o.re + o.im * o.im;
        Complex {
            re: (self.re * o.re + self.im * o.im) / d,
            im: (self.im * o.re - self.re * o.im) / d,
        }
    }
    fn add(self, o: Complex) -> Complex {
        Complex {
            re: self.re + o.re,
            im: self.im + o.im,
        }
    }
    fn scale(self, s: f64) -> Complex {
        Complex {
            re: self.re * s,
            im: self.im * s,
        }
    }
}

/// Terms of Weideman's rational expansion.
const WEIDEMAN_N: usize = 40;

struct Weideman {
    l: f64,
    a: [f64; WEIDEMAN_N],
}

fn weideman() -> &'static Weideman {
    static W: OnceLock<Weideman> = OnceLock::new();
    W.get_or_init(|| {
        let n = WEIDEMAN_N;
        let m = 2 * n;
        let l = (n as f64 / SQRT_2).sqrt();
        // f_j = exp(-t_j^2)(L^2 + t_j^2), t_j = L tan(theta_j / 2), theta_j = j pi / M,
        // j = -M+1..M-1 (f_{-M} = 0); a_n = (1/2M) sum_j f_j cos(pi j n / M).
        let f = |j: i64| -> f64 {
            let theta = j as f64 * PI / m as f64;
            let t = l * (0.5 * theta).tan();
            (-t * t).exp() * (l * l + t * t)
        };
        let mut a = [0.0; WEIDEMAN_N];
        for (idx, coef) in a.iter_mut().enumerate() {
            let nn = (idx + 1) as f64;
            let mut s = 0.0;
            for j in -(m as i64) + 1..m as i64 {
                s += f(j) * (PI * j as f64 * nn / m as f64).cos();
            }
            *coef = s / (2 * m) as f64;
        }
        Weideman { l, a }
    })
}

/// The Faddeeva function w(z) = exp(-z^2) erfc(-iz) for Im z >= 0 (Weideman 1994).
pub(crate) fn faddeeva(z: Complex) -> Complex {
    let wd = weideman();
    // L - iz and L + iz.
    let lmiz = Complex {
        re: wd.l + z.im,
        im: -z.re,
    };
    let lpiz = Complex {
        re: wd.l - z.im,
        im: z.re,
    };
    let zz = lpiz.div(lmiz);
    let mut p = Complex { re: 0.0, im: 0.0 };
    for &coef in wd.a.iter().rev() {
        p = p.mul(zz).add(Complex { re: coef, im: 0.0 });
    }
    let one = Complex { re: 1.0, im: 0.0 };
    let inv = one.div(lmiz);
    p.scale(2.0)
        .mul(inv)
        .mul(inv)
        .add(inv.scale(1.0 / PI.sqrt()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn faddeeva_matches_mpmath_in_the_upper_half_plane() {
        // w(z) = exp(-z^2) erfc(-iz), mpmath 1.3.0 at mp.dps = 30
        // (tools/reference/unit_values.py).
        for &(re, im, wre, wim) in MPMATH_W {
            let w = faddeeva(Complex { re, im });
            let mag = (wre * wre + wim * wim).sqrt();
            assert!(
                (w.re - wre).abs() < 2e-14 * mag.max(1e-3)
                    && (w.im - wim).abs() < 2e-14 * mag.max(1e-3),
                "w({re} + {im}i) = {w:?}, mpmath {wre} + {wim}i"
            );
        }
    }

    const MPMATH_W: &[(f64, f64, f64, f64)] = &[
        (0.0, 0.9, 0.456_531_651_323_117, 0.0),
        (0.3, 1.2, 0.368_411_993_279_006_74, 0.064_510_182_212_013_66),
        (1.0, 1.0, 0.304_744_205_256_912_6, 0.208_218_938_202_831_63),
        (2.5, 1.5, 0.111_233_459_562_558_27, 0.163_236_747_198_041_84),
        (
            5.0,
            2.0,
            0.040_643_676_333_494_374,
            0.097_987_311_156_571_92,
        ),
        (12.0, 1.1, 0.004_318_279_722_953_304, 0.046_780_734_180_966),
        (
            40.0,
            3.0,
            0.001_052_913_171_037_076,
            0.014_030_109_053_444_45,
        ),
        (
            150.0,
            0.95,
            2.382_197_056_332_168e-5,
            0.003_761_196_596_993_549,
        ),
        (0.0, 3.5, 0.155_293_655_608_894_3, 0.0),
        (
            7.0,
            0.5,
            0.005_910_424_131_058_674,
            0.081_011_438_857_947_81,
        ),
    ];
}

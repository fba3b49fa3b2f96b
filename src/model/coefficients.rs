//! The natural coefficients of a model's four lag-polynomial factors and their expansion
//! into the full AR and MA polynomials.

use crate::model::blueprint::Term;

/// The four polynomial factors in canonical order.
pub(crate) const FACTORS: [Term; 4] = [
    Term::Ar(0),
    Term::Ma(0),
    Term::SeasonalAr(0),
    Term::SeasonalMa(0),
];

/// Natural coefficients of the four factors.
#[derive(Debug, Clone, Default, PartialEq)]
pub(crate) struct Coefs {
    pub f: [Vec<f64>; 4],
}

/// Expand `(1 ∓ Σa_iB^i)(1 ∓ Σb_jB^{js})` into `out` (coefficient list, sign convention of
/// the factor kind); allocation-free once `out` has capacity.
pub(crate) fn expand_into(a: &[f64], b: &[f64], period: usize, is_ma: bool, out: &mut Vec<f64>) {
    let len = a.len() + b.len() * period;
    out.clear();
    out.resize(len, 0.0);
    for (i, &ai) in a.iter().enumerate() {
        out[i] += ai;
    }
    for (j, &bj) in b.iter().enumerate() {
        let lag = (j + 1) * period;
        out[lag - 1] += bj;
        for (i, &ai) in a.iter().enumerate() {
            // AR: −(−a)(−b) = −ab in "1 − Σc" form; MA: +ab.
            out[lag + i] += if is_ma { ai * bj } else { -ai * bj };
        }
    }
}

/// Expanded (φ, θ) of natural coefficients.
pub(crate) fn expanded(c: &Coefs, period: usize) -> (Vec<f64>, Vec<f64>) {
    let mut phi = Vec::new();
    let mut theta = Vec::new();
    expand_into(&c.f[0], &c.f[2], period, false, &mut phi);
    expand_into(&c.f[1], &c.f[3], period, true, &mut theta);
    (phi, theta)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::lag;

    #[test]
    fn expansion_matches_polynomial_product() {
        let mut out = Vec::new();
        expand_into(&[0.5, -0.2], &[0.3], 4, false, &mut out);
        assert_eq!(out, lag::expand_autoregressive(&[0.5, -0.2], &[0.3], 4));
        expand_into(&[0.4], &[0.6, 0.1], 3, true, &mut out);
        let want = lag::expand_moving_average(&[0.4], &[0.6, 0.1], 3);
        for (a, b) in out.iter().zip(&want) {
            assert!((a - b).abs() < 1e-15);
        }
    }
}

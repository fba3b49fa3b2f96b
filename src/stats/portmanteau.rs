//! Portmanteau tests of whiteness: Ljung–Box (Ljung & Box 1978) and Box–Pierce
//! (Box & Pierce 1970), at every lag `1..=H`.

use crate::base::dist::chi_square_upper;
use crate::base::error::{Error, Result};
use crate::stats::correlogram::{Correlogram, CorrelogramWorkspace};

/// One lag of a [`PortmanteauScan`].
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct PortmanteauRow {
    /// The lag `h` (the statistic sums lags `1..=h`).
    pub lag: usize,
    /// Ljung–Box statistic `Q_LB(h)`.
    #[serde(with = "crate::base::nan_as_null::one")]
    pub ljung_box: f64,
    /// Box–Pierce statistic `Q_BP(h)`.
    #[serde(with = "crate::base::nan_as_null::one")]
    pub box_pierce: f64,
    /// `h − fitted ARMA coefficients`, or `None` when that is not positive.
    pub degrees_of_freedom: Option<usize>,
    /// Upper-tail chi-square probability of `ljung_box`; `None` without degrees of freedom.
    pub ljung_box_p_value: Option<f64>,
    /// Upper-tail chi-square probability of `box_pierce`; `None` without degrees of freedom.
    pub box_pierce_p_value: Option<f64>,
}

/// A p-value at one lag of a portmanteau scan.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct LagPValue {
    /// The lag.
    pub lag: usize,
    /// The p-value there.
    pub p_value: f64,
}

/// Ljung–Box and Box–Pierce statistics for every lag `1..=H`.
///
/// ```
/// use lagwise::PortmanteauScan;
/// # fn main() -> Result<(), lagwise::Error> {
/// let residuals: Vec<f64> = (0..300).map(|t| (((t * 7919) % 1013) as f64).sin()).collect();
/// // Residuals of an ARMA(1,1): two coefficients were fitted.
/// let scan = PortmanteauScan::compute(&residuals, 20, 2)?;
/// assert!(scan.row(2).unwrap().ljung_box_p_value.is_none());
/// assert!(scan.row(10).unwrap().degrees_of_freedom == Some(8));
/// # Ok(()) }
/// ```
///
/// With `m` non-missing readings and sample autocorrelations `r(k)` (see
/// [`Correlogram`]):
///
/// ```text
/// Box–Pierce  Q_BP(h) = m · Σ_{k=1}^{h} r(k)²
/// Ljung–Box   Q_LB(h) = m(m+2) · Σ_{k=1}^{h} r(k)² / (m−k)
/// ```
///
/// Under the null of white noise (after fitting an ARMA model with `p + q` coefficients)
/// each is approximately chi-square with `h − (p + q)` degrees of freedom. Where
/// `h ≤ p + q` there are no degrees of freedom left and the p-value is `None` — absent,
/// not NaN. P-values come from the chi-square survival function of `statrs`.
#[derive(Debug, Clone, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(try_from = "PortmanteauRecord")]
#[non_exhaustive]
pub struct PortmanteauScan {
    fitted_coefficients: usize,
    readings: usize,
    rows: Vec<PortmanteauRow>,
}

/// The stored form of a scan.
#[derive(serde::Deserialize)]
struct PortmanteauRecord {
    fitted_coefficients: usize,
    readings: usize,
    rows: Vec<PortmanteauRow>,
}

impl TryFrom<PortmanteauRecord> for PortmanteauScan {
    type Error = String;
    fn try_from(r: PortmanteauRecord) -> std::result::Result<Self, String> {
        if let Some((i, row)) = r.rows.iter().enumerate().find(|(i, row)| row.lag != i + 1) {
            return Err(format!(
                "row {i} is for lag {}, expected lag {}",
                row.lag,
                i + 1
            ));
        }
        Ok(PortmanteauScan {
            fitted_coefficients: r.fitted_coefficients,
            readings: r.readings,
            rows: r.rows,
        })
    }
}

impl PortmanteauScan {
    /// Scan `values` (typically residuals; NaN = missing) at lags `1..=max_lag`, reducing
    /// the degrees of freedom by `fitted_coefficients` (the ARMA `p + q + P + Q`; do not
    /// count the mean or σ²).
    ///
    /// Errors: as [`Correlogram::compute`]; `max_lag` must be at least 1 and less than the
    /// number of non-missing readings.
    pub fn compute(values: &[f64], max_lag: usize, fitted_coefficients: usize) -> Result<Self> {
        Self::compute_with(
            values,
            max_lag,
            fitted_coefficients,
            &mut CorrelogramWorkspace::new(),
        )
    }

    /// [`PortmanteauScan::compute`] on a caller-held workspace.
    pub fn compute_with(
        values: &[f64],
        max_lag: usize,
        fitted_coefficients: usize,
        workspace: &mut CorrelogramWorkspace,
    ) -> Result<Self> {
        if max_lag == 0 {
            return Err(Error::invalid(
                "portmanteau scan",
                "max lag must be at least 1",
            ));
        }
        let cg = Correlogram::compute_with(values, max_lag, workspace)?;
        Self::from_correlogram(&cg, max_lag, fitted_coefficients)
    }

    /// Scan an already computed correlogram at lags `1..=max_lag`.
    pub fn from_correlogram(
        correlogram: &Correlogram,
        max_lag: usize,
        fitted_coefficients: usize,
    ) -> Result<Self> {
        const WHAT: &str = "portmanteau scan";
        let m = correlogram.readings_present();
        if max_lag == 0 || max_lag > correlogram.max_lag() {
            return Err(Error::invalid(
                WHAT,
                format!(
                    "max lag {max_lag} must be between 1 and the correlogram's max lag {}",
                    correlogram.max_lag()
                ),
            ));
        }
        if max_lag >= m {
            return Err(Error::invalid(
                WHAT,
                format!("max lag {max_lag} must be less than the {m} non-missing readings"),
            ));
        }
        let r = correlogram.autocorrelations().values();
        let mf = m as f64;
        let mut sum_lb = 0.0;
        let mut sum_bp = 0.0;
        let mut rows = Vec::with_capacity(max_lag);
        for (h, &rh) in r.iter().enumerate().take(max_lag + 1).skip(1) {
            let r2 = rh * rh;
            sum_bp += r2;
            sum_lb += r2 / (mf - h as f64);
            let ljung_box = mf * (mf + 2.0) * sum_lb;
            let box_pierce = mf * sum_bp;
            let df = h.checked_sub(fitted_coefficients).filter(|&d| d > 0);
            let (lp, bp) = match df {
                Some(d) => (
                    Some(chi_square_upper(ljung_box, d)),
                    Some(chi_square_upper(box_pierce, d)),
                ),
                None => (None, None),
            };
            rows.push(PortmanteauRow {
                lag: h,
                ljung_box,
                box_pierce,
                degrees_of_freedom: df,
                ljung_box_p_value: lp,
                box_pierce_p_value: bp,
            });
        }
        Ok(PortmanteauScan {
            fitted_coefficients,
            readings: m,
            rows,
        })
    }

    /// All rows, lag 1 first.
    pub fn rows(&self) -> &[PortmanteauRow] {
        &self.rows
    }
    /// The row for lag `h`, if scanned.
    pub fn row(&self, lag: usize) -> Option<&PortmanteauRow> {
        lag.checked_sub(1).and_then(|i| self.rows.get(i))
    }
    /// Number of ARMA coefficients the degrees of freedom were reduced by.
    pub fn fitted_coefficients(&self) -> usize {
        self.fitted_coefficients
    }
    /// Number of non-missing readings the statistics used.
    pub fn readings(&self) -> usize {
        self.readings
    }
    /// The smallest Ljung–Box p-value over the scanned lags, with its lag (the first
    /// such lag on ties; `None` when no lag has degrees of freedom).
    pub fn smallest_ljung_box_p_value(&self) -> Option<LagPValue> {
        self.rows
            .iter()
            .filter_map(|r| {
                r.ljung_box_p_value.map(|p_value| LagPValue {
                    lag: r.lag,
                    p_value,
                })
            })
            .min_by(|a, b| a.p_value.total_cmp(&b.p_value))
    }
    /// Lags whose Ljung–Box p-value is below `alpha`.
    pub fn ljung_box_rejections(&self, alpha: f64) -> Vec<usize> {
        self.rows
            .iter()
            .filter(|r| r.ljung_box_p_value.is_some_and(|p| p < alpha))
            .map(|r| r.lag)
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::base::dist::chi_square_quantile;

    #[test]
    fn statistics_follow_their_definitions() {
        let x: Vec<f64> = (0..50).map(|t| ((t * 17 + 3) % 23) as f64).collect();
        let cg = Correlogram::compute(&x, 5).unwrap();
        let scan = PortmanteauScan::from_correlogram(&cg, 5, 1).unwrap();
        let r = cg.autocorrelations().values();
        let n = 50.0;
        let lb3 = n * (n + 2.0) * (1..=3).map(|k| r[k] * r[k] / (n - k as f64)).sum::<f64>();
        let bp3 = n * (1..=3).map(|k| r[k] * r[k]).sum::<f64>();
        let row = scan.row(3).unwrap();
        assert!((row.ljung_box - lb3).abs() < 1e-12 && (row.box_pierce - bp3).abs() < 1e-12);
        assert_eq!(row.degrees_of_freedom, Some(2));
        assert!(scan.row(1).unwrap().ljung_box_p_value.is_none());
        assert!(scan.row(0).is_none() && scan.row(6).is_none());
    }

    /// Abramowitz & Stegun (1964), Table 26.8, percentage points of the chi-square
    /// distribution (values from memory, six significant digits): the upper-tail
    /// probability at each tabulated point must equal the table's level.
    #[test]
    fn chi_square_table_26_8() {
        let table = [
            (1, 0.95, 3.84146),
            (1, 0.99, 6.63490),
            (2, 0.95, 5.99146),
            (2, 0.99, 9.21034),
            (5, 0.95, 11.0705),
            (5, 0.99, 15.0863),
            (10, 0.05, 3.94030),
            (10, 0.95, 18.3070),
            (10, 0.99, 23.2093),
            (20, 0.95, 31.4104),
            (20, 0.99, 37.5662),
            (30, 0.95, 43.7730),
        ];
        for (df, p, x) in table {
            let upper = chi_square_upper(x, df);
            assert!((upper - (1.0 - p)).abs() < 2e-6, "df={df} p={p}: {upper}");
            let q = chi_square_quantile(p, df);
            assert!((q - x).abs() < 1e-5 * x, "df={df} p={p}: quantile {q}");
        }
        assert_eq!(chi_square_upper(f64::INFINITY, 3), 0.0);
    }

    #[test]
    fn lag_limits() {
        let x = [1.0, 2.0, 1.5, 3.0];
        assert!(PortmanteauScan::compute(&x, 0, 0).is_err());
        assert!(PortmanteauScan::compute(&x, 3, 0).is_ok());
        let y = [1.0, f64::NAN, 2.0, 1.5];
        // 3 present readings: lag 3 is refused even though the length allows it.
        assert!(PortmanteauScan::compute(&y, 3, 0).is_err());
    }
}

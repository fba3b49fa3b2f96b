//! Unit-root and stationarity tests, and a seasonal-strength measure: what the order
//! search reads to choose the differencing, usable on their own.

use crate::base::error::{Error, ErrorKind, Result};
use crate::base::linalg;

/// Deterministic terms of a unit-root or stationarity test.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TrendTerms {
    /// A constant (level).
    Level,
    /// A constant and a linear trend.
    LevelAndTrend,
}

/// A tabulated critical value of a test at one significance level.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub struct CriticalValue {
    /// Significance level (e.g. 0.05).
    pub level: f64,
    /// The statistic's critical value there.
    pub value: f64,
}

fn critical(table: &[(f64, f64)]) -> Vec<CriticalValue> {
    table
        .iter()
        .map(|&(level, value)| CriticalValue { level, value })
        .collect()
}

/// Result of a unit-root or stationarity test.
///
/// # Tests
/// - **KPSS** (Kwiatkowski, Phillips, Schmidt & Shin 1992): level or trend stationarity.
///   Statistic `η = n⁻² Σ S_t² / σ̂²_LR` with `S_t` the partial sums of the residuals from
///   the mean (or a linear trend) and the long-run variance from a Bartlett window of
///   `l = ⌊4 (n/100)^{1/4}⌋` lags (the paper's "l4" rule). Critical values from the
///   paper's Table 1; p-values interpolated linearly between the tabulated levels and
///   reported as bounds outside them.
/// - **Augmented Dickey–Fuller** (Dickey & Fuller 1979): `Δy_t = α [+ βt] + γ y_{t−1} +
///   Σ_{j≤k} δ_j Δy_{t−j} + e_t`, the t-ratio of γ; `k` chosen by AIC from
///   `k_max = ⌊12 (n/100)^{1/4}⌋` (Schwert's rule, common practice) on a common sample.
///   Critical values from MacKinnon's response surfaces (MacKinnon 2010, Table 2, values
///   from memory); p-values interpolated between the 1%, 5% and 10% points.
/// - **Seasonal strength** (Wang, Smith & Hyndman 2006): `F_s = max(0, 1 − Var(R)/Var(S+R))`
///   from a moving-average decomposition (centred moving-average trend, a seasonal
///   component averaged over ±2 cycles so it may evolve as in STL, remainder). Seasonal differencing when `F_s > 0.64` (common practice).
///
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct RootTest {
    /// The statistic.
    pub statistic: f64,
    /// Critical values at 10%, 5%, 1% (and 2.5% for KPSS).
    pub critical_values: Vec<CriticalValue>,
    /// Interpolated p-value, clamped to the tabulated range `[0.01, 0.10]`.
    pub p_value: f64,
    /// Lags used (Bartlett window for KPSS, augmentation lags for ADF).
    pub lags: usize,
    /// Readings used.
    pub observations: usize,
}

fn present_run(x: &[f64], what: &'static str, min: usize) -> Result<Vec<f64>> {
    crate::base::screen::screen(x, what, min, crate::base::screen::ConstantPolicy::Refuse)?;
    // Tests need consecutive readings: interior gaps are filled by linear interpolation,
    // leading and trailing gaps dropped (documented).
    let first = x.iter().position(|v| !v.is_nan()).unwrap_or(0);
    let last = x.iter().rposition(|v| !v.is_nan()).unwrap_or(0);
    let mut y: Vec<f64> = x[first..=last].to_vec();
    let mut t = 0;
    while t < y.len() {
        if y[t].is_nan() {
            let start = t;
            while y[t].is_nan() {
                t += 1;
            }
            let (a, b) = (y[start - 1], y[t]);
            let span = (t - start + 1) as f64;
            for (k, v) in y[start..t].iter_mut().enumerate() {
                *v = a + (b - a) * (k + 1) as f64 / span;
            }
        }
        t += 1;
    }
    if y.len() < min {
        return Err(Error::new(ErrorKind::TooShort {
            what,
            present: y.len(),
            needed: min,
        }));
    }
    Ok(y)
}

fn interpolate_p(stat: f64, table: &[(f64, f64)], upper_tail: bool) -> f64 {
    // table: (level, critical) sorted by level descending (0.10, 0.05, …, 0.01).
    let mut pts: Vec<(f64, f64)> = table.to_vec();
    pts.sort_by(|a, b| b.0.total_cmp(&a.0));
    let beyond = |s: f64, c: f64| if upper_tail { s >= c } else { s <= c };
    if !beyond(stat, pts[0].1) {
        return pts[0].0;
    }
    for w in pts.windows(2) {
        let ((l0, c0), (l1, c1)) = (w[0], w[1]);
        if !beyond(stat, c1) {
            let f = (stat - c0) / (c1 - c0);
            return l0 + f * (l1 - l0);
        }
    }
    pts[pts.len() - 1].0
}

/// KPSS test of level or trend stationarity (NaN = missing; see the module docs).
///
/// ```
/// use lagwise::{kpss, TrendTerms};
/// use lagwise::Simulator;
/// # fn main() -> Result<(), lagwise::Error> {
/// let walk = Simulator::builder().differencing(1, 0).build()?.generate(500, 1);
/// assert!(kpss(&walk, TrendTerms::Level)?.p_value <= 0.011); // rejects stationarity
/// # Ok(()) }
/// ```
pub fn kpss(series: &[f64], terms: TrendTerms) -> Result<RootTest> {
    const WHAT: &str = "KPSS test";
    let y = present_run(series, WHAT, 12)?;
    let n = y.len();
    let nf = n as f64;
    let resid: Vec<f64> = match terms {
        TrendTerms::Level => {
            let m = y.iter().sum::<f64>() / nf;
            y.iter().map(|v| v - m).collect()
        }
        TrendTerms::LevelAndTrend => {
            let cols = vec![vec![1.0; n], (0..n).map(|t| t as f64).collect()];
            let (b, _) = linalg::least_squares(&cols, &y)
                .ok_or_else(|| Error::numerical(WHAT, "trend regression failed"))?;
            y.iter()
                .enumerate()
                .map(|(t, v)| v - b[0] - b[1] * t as f64)
                .collect()
        }
    };
    let lags = (4.0 * (nf / 100.0).powf(0.25)).floor() as usize;
    let mut lrv = resid.iter().map(|e| e * e).sum::<f64>() / nf;
    for l in 1..=lags.min(n - 1) {
        let w = 1.0 - l as f64 / (lags as f64 + 1.0);
        let g: f64 = (l..n).map(|t| resid[t] * resid[t - l]).sum::<f64>() / nf;
        lrv += 2.0 * w * g;
    }
    if !(lrv > 0.0) {
        return Err(Error::numerical(WHAT, "long-run variance is not positive"));
    }
    let mut s = 0.0;
    let mut ss = 0.0;
    for e in &resid {
        s += e;
        ss += s * s;
    }
    let statistic = ss / (nf * nf * lrv);
    // KPSS (1992), Table 1.
    let critical_values = match terms {
        TrendTerms::Level => vec![(0.10, 0.347), (0.05, 0.463), (0.025, 0.574), (0.01, 0.739)],
        TrendTerms::LevelAndTrend => {
            vec![(0.10, 0.119), (0.05, 0.146), (0.025, 0.176), (0.01, 0.216)]
        }
    };
    let p_value = interpolate_p(statistic, &critical_values, true);
    Ok(RootTest {
        statistic,
        critical_values: critical(&critical_values),
        p_value,
        lags,
        observations: n,
    })
}

/// MacKinnon (2010) response-surface critical value `β∞ + β1/T + β2/T² + β3/T³`.
fn mackinnon(terms: TrendTerms, level: f64, t: f64) -> f64 {
    let b: [f64; 4] = match (terms, level) {
        (TrendTerms::Level, l) if l <= 0.01 => [-3.43035, -6.5393, -16.786, -79.433],
        (TrendTerms::Level, l) if l <= 0.05 => [-2.86154, -2.8903, -4.234, -40.040],
        (TrendTerms::Level, _) => [-2.56677, -1.5384, -2.809, 0.0],
        (TrendTerms::LevelAndTrend, l) if l <= 0.01 => [-3.95877, -9.0531, -28.428, -134.155],
        (TrendTerms::LevelAndTrend, l) if l <= 0.05 => [-3.41049, -4.3904, -9.036, -45.374],
        (TrendTerms::LevelAndTrend, _) => [-3.12705, -2.5856, -3.925, -22.380],
    };
    b[0] + b[1] / t + b[2] / (t * t) + b[3] / (t * t * t)
}

/// Augmented Dickey–Fuller test of a unit root (NaN = missing; see the module docs).
///
/// ```
/// use lagwise::{augmented_dickey_fuller, TrendTerms};
/// use lagwise::Simulator;
/// # fn main() -> Result<(), lagwise::Error> {
/// let stationary = Simulator::builder().autoregressive(&[0.5]).build()?.generate(500, 2);
/// assert!(augmented_dickey_fuller(&stationary, TrendTerms::Level)?.p_value <= 0.011);
/// # Ok(()) }
/// ```
pub fn augmented_dickey_fuller(series: &[f64], terms: TrendTerms) -> Result<RootTest> {
    const WHAT: &str = "augmented Dickey-Fuller test";
    let y = present_run(series, WHAT, 20)?;
    let n = y.len();
    let dy: Vec<f64> = (1..n).map(|t| y[t] - y[t - 1]).collect();
    let kmax = ((12.0 * (n as f64 / 100.0).powf(0.25)).floor() as usize).min(n / 4);
    // Regression for lag k on the common sample t = kmax+1 .. n-1 (indices into dy).
    let design = |k: usize, start: usize| -> (Vec<Vec<f64>>, Vec<f64>) {
        let rows: Vec<usize> = (start..dy.len()).collect();
        let mut cols = vec![rows.iter().map(|_| 1.0).collect::<Vec<f64>>()];
        if terms == TrendTerms::LevelAndTrend {
            cols.push(rows.iter().map(|&t| t as f64).collect());
        }
        cols.push(rows.iter().map(|&t| y[t]).collect()); // y_{t} is the level before dy[t]
        for j in 1..=k {
            cols.push(rows.iter().map(|&t| dy[t - j]).collect());
        }
        (cols, rows.iter().map(|&t| dy[t]).collect())
    };
    let gamma_col = if terms == TrendTerms::LevelAndTrend {
        2
    } else {
        1
    };
    // Lag length by AIC on the common sample t = kmax+1 .. n-1: the fits with 0..=kmax
    // lags are nested, so one QR of the largest design gives every residual sum.
    let base = gamma_col + 1;
    let mut best = (f64::INFINITY, 0usize);
    let (cols, target) = design(kmax, kmax);
    let m = target.len() as f64;
    for (j, ssr) in linalg::nested_residual_sums(&cols, &target)
        .into_iter()
        .enumerate()
        .skip(base - 1)
    {
        let k = j + 1 - base;
        let info = m * (ssr / m).ln() + 2.0 * (base + k) as f64;
        if info < best.0 {
            best = (info, k);
        }
    }
    let k = best.1;
    let (cols, target) = design(k, k);
    let (b, cov) = linalg::least_squares(&cols, &target)
        .ok_or_else(|| Error::numerical(WHAT, "regression is singular"))?;
    let m = target.len();
    let ssr: f64 = (0..m)
        .map(|i| {
            let fit: f64 = cols.iter().zip(&b).map(|(c, bj)| c[i] * bj).sum();
            (target[i] - fit).powi(2)
        })
        .sum();
    let s2 = ssr / (m - cols.len()) as f64;
    let p = cols.len();
    let se = (s2 * cov[gamma_col * p + gamma_col]).sqrt();
    let statistic = b[gamma_col] / se;
    let t = m as f64;
    let critical_values = vec![
        (0.10, mackinnon(terms, 0.10, t)),
        (0.05, mackinnon(terms, 0.05, t)),
        (0.01, mackinnon(terms, 0.01, t)),
    ];
    let p_value = interpolate_p(statistic, &critical_values, false);
    Ok(RootTest {
        statistic,
        critical_values: critical(&critical_values),
        p_value,
        lags: k,
        observations: m,
    })
}

/// Seasonal strength `F_s ∈ [0, 1]` at `period` (classical decomposition; module docs).
pub fn seasonal_strength(series: &[f64], period: usize) -> Result<f64> {
    const WHAT: &str = "seasonal strength";
    if period < 2 {
        return Err(Error::invalid(
            WHAT,
            format!("period {period} must be at least 2"),
        ));
    }
    let y = present_run(series, WHAT, 2 * period + 1)?;
    let n = y.len();
    // Centred moving average of order `period` (2×s MA for even s).
    let half = period / 2;
    let mut trend = vec![f64::NAN; n];
    for t in half..n - half {
        let v = if period % 2 == 1 {
            y[t - half..=t + half].iter().sum::<f64>() / period as f64
        } else {
            (0.5 * y[t - half] + y[t - half + 1..t + half].iter().sum::<f64>() + 0.5 * y[t + half])
                / period as f64
        };
        trend[t] = v;
    }
    let detr: Vec<f64> = y.iter().zip(&trend).map(|(a, b)| a - b).collect();
    // Seasonal component allowed to evolve (as in STL, which the measure was defined
    // with): at each t the mean of the detrended values at the same season position
    // within ±2 cycles, so a seasonal pattern that wanders (a seasonal unit root) is
    // still recognised as seasonal.
    let window = 2isize;
    let seasonal_at = |t: usize| -> f64 {
        let (mut sum, mut cnt) = (0.0, 0usize);
        for k in -window..=window {
            let u = t as isize + k * period as isize;
            if u >= 0 && (u as usize) < n && detr[u as usize].is_finite() {
                sum += detr[u as usize];
                cnt += 1;
            }
        }
        if cnt == 0 { 0.0 } else { sum / cnt as f64 }
    };
    let raw: Vec<f64> = (0..n).map(seasonal_at).collect();
    let (mut sr, mut r) = (Vec::new(), Vec::new());
    for (t, v) in detr.iter().enumerate() {
        if v.is_finite() {
            // Centre the seasonal estimate on its own cycle so it carries no level.
            let c0 = t - t % period;
            let c1 = (c0 + period).min(n);
            let centre = raw[c0..c1].iter().sum::<f64>() / (c1 - c0) as f64;
            let s = raw[t] - centre;
            r.push(v - s);
            sr.push(*v);
        }
    }
    let var = |x: &[f64]| {
        let m = x.iter().sum::<f64>() / x.len() as f64;
        x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / x.len() as f64
    };
    let total = var(&sr);
    if !(total > 0.0) {
        return Ok(0.0);
    }
    Ok((1.0 - var(&r) / total).max(0.0))
}

//! Estimators: conditional sum of squares, exact maximum likelihood, and the staged
//! combination; Hannan–Rissanen starting values; the optimiser boundary (argmin BFGS
//! with a Moré–Thuente line search); numerical Hessian for standard errors.

use std::cell::{Cell, RefCell};

use argmin::core::{CostFunction, Executor, Gradient, State, TerminationReason, TerminationStatus};
use argmin::solver::linesearch::BacktrackingLineSearch;
use argmin::solver::linesearch::condition::ArmijoCondition;
use argmin::solver::quasinewton::BFGS;

use crate::base::error::{Error, ErrorKind, Result};
use crate::base::linalg;

mod css_gradient;
mod exact_score;
use crate::filter::innovations::{direct_recursion, segment_dot};
use crate::filter::kalman::{DirectPhase, KalmanWorkspace};
use crate::filter::lanes::add_lane_sums;
use crate::model::blueprint::Blueprint;
use crate::model::coefficients::Term;
use crate::model::coefficients::{Factor, FactorCoefficients};
use crate::model::lag;

/// The differenced data of one fit, with its regression columns.
#[derive(Debug, Clone)]
pub(crate) struct Prepared {
    /// Length of the original series.
    pub original_len: usize,
    /// Length after differencing.
    pub n: usize,
    /// Columns (column-major): 0 = differenced series minus held regression effects,
    /// then one column per profiled regression term.
    pub data: Vec<f64>,
    pub ncols: usize,
    /// Terms of the profiled regression columns (col 1..).
    pub profiled: Vec<Term>,
    pub has_missing: bool,
    pub missing_original: usize,
    /// Preliminary regression coefficients (OLS) already removed from column 0, so the
    /// filtered cross-products do not cancel catastrophically; the likelihood's GLS
    /// estimates are corrections to these.
    pub beta_offset: Vec<f64>,
    /// Power-of-two factor the data were divided by (results are multiplied back).
    pub data_scale: f64,
}

/// Apply `(1 − B)^d (1 − B^s)^D` to `x`, returning a series shorter by `d + D·s`.
pub(crate) fn difference(x: &[f64], d: usize, seasonal_d: usize, period: usize) -> Vec<f64> {
    difference_owned(x.to_vec(), d, seasonal_d, period)
}

/// [`difference`] in place on a vector handed over (no new allocation).
pub(crate) fn difference_owned(
    mut v: Vec<f64>,
    d: usize,
    seasonal_d: usize,
    period: usize,
) -> Vec<f64> {
    for (lag, times) in [(period, seasonal_d), (1, d)] {
        for _ in 0..times {
            if v.len() <= lag {
                return Vec::new();
            }
            for t in (lag..v.len()).rev() {
                v[t] -= v[t - lag];
            }
            v.drain(..lag);
        }
    }
    v
}

/// Regression column of a term on the original time axis.
pub(crate) fn regression_column(term: Term, len: usize, regressors: &[&[f64]]) -> Vec<f64> {
    match term {
        Term::Drift => (0..len).map(|t| t as f64).collect(),
        Term::Exogenous(i) => regressors[i - 1][..len].to_vec(),
        Term::CycleCos { .. } | Term::CycleSin { .. } => (0..len as u64)
            .map(|t| crate::model::cycles::term_wave(term, t).unwrap_or(0.0))
            .collect(),
        _ => vec![1.0; len],
    }
}

/// The regression terms of a blueprint, in column order.
pub(crate) fn regression_terms(bp: &Blueprint) -> Vec<Term> {
    bp.terms().into_iter().filter(|t| !t.is_arma()).collect()
}

/// Check regressor columns against the blueprint and the series length.
pub(crate) fn check_regressors(
    bp: &Blueprint,
    len: usize,
    regressors: &[&[f64]],
    what: &'static str,
) -> Result<()> {
    if regressors.len() != bp.exogenous {
        return Err(Error::invalid(
            what,
            format!(
                "{} regressor columns given, the blueprint declares {}",
                regressors.len(),
                bp.exogenous
            ),
        ));
    }
    for (j, col) in regressors.iter().enumerate() {
        if col.len() != len {
            return Err(Error::new(ErrorKind::LengthMismatch {
                what,
                left_name: "series",
                left: len,
                right_name: "a regressor column",
                right: col.len(),
            }));
        }
        if let Some(index) = col.iter().position(|v| !v.is_finite()) {
            return Err(Error::invalid(
                what,
                format!(
                    "regressor column {} has {} at index {index}; regressors must be finite",
                    j + 1,
                    col[index]
                ),
            ));
        }
    }
    Ok(())
}

/// Screen the series against the blueprint and build the differenced columns.
pub(crate) fn prepare(bp: &Blueprint, series: &[f64], regressors: &[&[f64]]) -> Result<Prepared> {
    const WHAT: &str = "fit";
    check_regressors(bp, series.len(), regressors, WHAT)?;
    let loss = bp.differencing_loss();
    let estimated = bp
        .terms()
        .iter()
        .filter(|t| bp.held_value(**t).is_none())
        .count();
    let s =
        crate::base::screen::screen(series, WHAT, 2, crate::base::screen::ConstantPolicy::Refuse)?;
    if series.len() <= loss {
        return Err(Error::new(ErrorKind::TooShort {
            what: WHAT,
            present: s.present,
            needed: loss + estimated + 2,
        }));
    }
    check_full_cycles(bp.period, series.len(), WHAT)?;
    for c in &bp.cycles {
        check_full_harmonic_cycles(c.period, series.len(), WHAT)?;
    }
    // Work in exactly rescaled units (a power of two) so that readings near 1e±300 neither
    // overflow nor underflow in sums of squares; results are scaled back in `fit`.
    let data_scale = s.scale;
    let inv = 1.0 / data_scale;
    let mut y: Vec<f64> = series.iter().map(|v| v * inv).collect();
    let mut profiled = Vec::new();
    for term in regression_terms(bp) {
        match bp.held_value(term) {
            Some(v) => {
                let col = regression_column(term, y.len(), regressors);
                for (yi, c) in y.iter_mut().zip(col) {
                    *yi -= v * inv * c;
                }
            }
            None => profiled.push(term),
        }
    }
    let w = difference_owned(y, bp.d, bp.seasonal_d, bp.period);
    let n = w.len();
    let present_w = w.iter().filter(|v| !v.is_nan()).count();
    check_orders_fit(bp, s.present, present_w, n)?;
    let present = || w.iter().copied().filter(|v| !v.is_nan());
    let mean = present().sum::<f64>() / present_w as f64;
    let var = present().map(|v| (v - mean) * (v - mean)).sum::<f64>() / present_w as f64;
    if !(var > 0.0) || !var.is_finite() {
        return Err(Error::new(ErrorKind::ConstantSeries {
            what: "fit (after differencing)",
            value: mean,
        }));
    }
    let ncols = 1 + profiled.len();
    let mut data = w;
    data.reserve_exact((ncols - 1) * n);
    for &term in &profiled {
        let col = regression_column(term, series.len(), regressors);
        let dcol = difference_owned(col, bp.d, bp.seasonal_d, bp.period);
        data.extend(dcol);
    }
    // Centre column 0 on a preliminary OLS fit of the regression columns.
    let mut beta_offset = vec![0.0; ncols - 1];
    if ncols > 1 {
        let (cols, y) = present_rows(&data, n, ncols, 0);
        if let Some((b, _)) = crate::base::linalg::least_squares_owned(cols, y) {
            for t in 0..n {
                let mut fit = 0.0;
                for c in 1..ncols {
                    fit += b[c - 1] * data[c * n + t];
                }
                data[t] -= fit;
            }
            beta_offset = b;
        }
    }
    Ok(Prepared {
        beta_offset,
        data_scale,
        original_len: series.len(),
        n,
        data,
        ncols,
        profiled,
        has_missing: present_w < n,
        missing_original: series.len() - s.present,
    })
}

/// The regression columns 1.. and column 0 of column-major `data` (`ncols` columns of
/// `n`) at the rows from `from` on where column 0 is present, as owned vectors for a
/// least-squares solve.
fn present_rows(data: &[f64], n: usize, ncols: usize, from: usize) -> (Vec<Vec<f64>>, Vec<f64>) {
    let present = |t: &usize| !data[*t].is_nan();
    let cols = (1..ncols)
        .map(|c| (from..n).filter(present).map(|t| data[c * n + t]).collect())
        .collect();
    let y = (from..n).filter(present).map(|t| data[t]).collect();
    (cols, y)
}

/// Longest stretch of differenced readings (the last ones) the starting values are
/// computed from (see [`starting_values`]).
const STARTING_SPAN: usize = 16_384;

/// Seasonal terms need at least two full cycles of readings (`n ≥ 2s`): with fewer, a
/// seasonal difference leaves less than one cycle and seasonal coefficients rest on a
/// handful of pairs of readings.
pub(crate) fn check_full_cycles(period: usize, len: usize, what: &'static str) -> Result<()> {
    if period > 1 && len < 2 * period {
        return Err(Error::invalid(
            what,
            format!(
                "the period s = {period} needs at least two full cycles ({} readings); the series has {len}",
                2 * period
            ),
        ));
    }
    Ok(())
}

/// A cycle described by harmonics needs at least two full cycles of readings too: with
/// less, its shape is confounded with the slow wander of the errors.
pub(crate) fn check_full_harmonic_cycles(
    period: usize,
    len: usize,
    what: &'static str,
) -> Result<()> {
    if len < 2 * period {
        return Err(Error::invalid(
            what,
            format!(
                "the cycle of period {period} needs at least two full cycles ({} readings); the series has {len}",
                2 * period
            ),
        ));
    }
    Ok(())
}

/// Whether the data leave enough readings for `bp`'s orders: more present differenced
/// readings than estimated parameters (σ² included, and the conditioned-on readings for
/// CSS), and more differenced readings than the expanded orders.
fn check_orders_fit(bp: &Blueprint, present: usize, present_w: usize, n: usize) -> Result<()> {
    const WHAT: &str = "fit";
    let (p_exp, q_exp) = bp.expanded_degrees();
    let loss = bp.differencing_loss();
    let estimated = bp
        .terms()
        .iter()
        .filter(|t| bp.held_value(**t).is_none())
        .count();
    let needed = estimated
        + 2
        + if bp.estimator == crate::model::blueprint::Estimator::ConditionalSumOfSquares {
            p_exp
        } else {
            0
        };
    if present_w < needed {
        return Err(Error::new(ErrorKind::TooShort {
            what: WHAT,
            present,
            needed: needed + loss + (present - present_w.min(present)).min(loss),
        }));
    }
    if p_exp + q_exp >= n {
        return Err(Error::invalid(
            WHAT,
            format!(
                "expanded orders p + P*s = {p_exp}, q + Q*s = {q_exp} need more than {} differenced readings",
                n
            ),
        ));
    }
    Ok(())
}

impl Prepared {
    /// The same prepared data for another blueprint with the same differencing, period
    /// and regression terms (an order search's candidates), after the checks that
    /// depend on its orders.
    pub(crate) fn reuse_for(&self, bp: &Blueprint) -> Result<Prepared> {
        let present = self.original_len - self.missing_original;
        let present_w = self.data[..self.n].iter().filter(|v| !v.is_nan()).count();
        check_orders_fit(bp, present, present_w, self.n)?;
        Ok(self.clone())
    }
}

#[derive(Debug, Clone)]
struct FactorLayout {
    factor: Factor,
    len: usize,
    transformed: bool,
    held: Vec<Option<f64>>,
    offset: usize,
}

/// Where the optimiser's free parameters go.
#[derive(Debug, Clone)]
pub(crate) struct Layout {
    factors: Vec<FactorLayout>,
    pub free_len: usize,
}

impl Layout {
    pub(crate) fn new(bp: &Blueprint) -> Self {
        let lens = [bp.p, bp.q, bp.seasonal_p, bp.seasonal_q];
        let mut offset = 0;
        let mut factors = Vec::with_capacity(4);
        for (factor, len) in Factor::ALL.into_iter().zip(lens) {
            let held: Vec<Option<f64>> = (1..=len).map(|i| bp.held_value(factor.term(i))).collect();
            let nheld = held.iter().filter(|h| h.is_some()).count();
            let transformed = nheld == 0;
            factors.push(FactorLayout {
                factor,
                len,
                transformed,
                held,
                offset,
            });
            offset += len - nheld;
        }
        Layout {
            factors,
            free_len: offset,
        }
    }

    /// Fill natural coefficients from optimiser coordinates. `false` if inadmissible.
    fn natural(
        &self,
        x: &[f64],
        out: &mut FactorCoefficients,
        kappa: &mut Vec<f64>,
        tmp: &mut Vec<f64>,
    ) -> bool {
        let mut ok = true;
        for fl in &self.factors {
            let c = out.of_mut(fl.factor);
            c.clear();
            c.resize(fl.len, 0.0);
            if fl.len == 0 {
                continue;
            }
            kappa.resize(fl.len, 0.0);
            tmp.resize(fl.len, 0.0);
            if fl.transformed {
                lag::admissible_from_unconstrained(
                    &x[fl.offset..fl.offset + fl.len],
                    c,
                    kappa,
                    tmp,
                );
                if fl.factor.is_moving_average() {
                    c.iter_mut().for_each(|v| *v = -*v);
                }
            } else {
                let mut j = 0;
                for i in 0..fl.len {
                    c[i] = match fl.held[i] {
                        Some(v) => v,
                        None => {
                            j += 1;
                            x[fl.offset + j - 1]
                        }
                    };
                }
                ok &= admissible_with(c, fl.factor.step_down_sign(), kappa, tmp);
            }
        }
        ok
    }

    /// Fill natural coefficients from raw free values (held entries from the blueprint).
    /// `false` if inadmissible. Allocation-free once `out` has grown.
    pub(crate) fn natural_raw(
        &self,
        z: &[f64],
        out: &mut FactorCoefficients,
        ws: &mut EvalWorkspace,
    ) -> bool {
        let mut j = 0;
        let mut ok = true;
        for fl in &self.factors {
            let c = out.of_mut(fl.factor);
            c.clear();
            for i in 0..fl.len {
                c.push(match fl.held[i] {
                    Some(v) => v,
                    None => {
                        j += 1;
                        z[j - 1]
                    }
                });
            }
            ok &= admissible_with(c, fl.factor.step_down_sign(), &mut ws.kappa, &mut ws.tmp);
        }
        ok
    }

    /// Optimiser coordinates from natural coefficients (which must be admissible).
    fn coordinates(&self, c: &FactorCoefficients) -> Option<Vec<f64>> {
        let mut x = vec![0.0; self.free_len];
        for fl in &self.factors {
            if fl.len == 0 {
                continue;
            }
            if fl.transformed {
                let sign = fl.factor.step_down_sign();
                let ar: Vec<f64> = c.of(fl.factor).iter().map(|v| sign * v).collect();
                let u = lag::unconstrained_from_admissible(&ar)?;
                x[fl.offset..fl.offset + fl.len].copy_from_slice(&u);
            } else {
                let mut j = 0;
                for i in 0..fl.len {
                    if fl.held[i].is_none() {
                        x[fl.offset + j] = c.of(fl.factor)[i];
                        j += 1;
                    }
                }
            }
        }
        Some(x)
    }

    /// Natural free coefficients (for the Hessian), in factor order.
    fn natural_free(&self, c: &FactorCoefficients) -> Vec<f64> {
        let mut z = Vec::with_capacity(self.free_len);
        for fl in &self.factors {
            for i in 0..fl.len {
                if fl.held[i].is_none() {
                    z.push(c.of(fl.factor)[i]);
                }
            }
        }
        z
    }

    /// Natural coefficients with free entries replaced by `z` (inverse of natural_free).
    fn with_natural_free(&self, base: &FactorCoefficients, z: &[f64]) -> FactorCoefficients {
        let mut out = base.clone();
        let mut j = 0;
        for fl in &self.factors {
            for i in 0..fl.len {
                if fl.held[i].is_none() {
                    out.of_mut(fl.factor)[i] = z[j];
                    j += 1;
                }
            }
        }
        out
    }

    /// Terms of the free coefficients, in the order of `natural_free`.
    pub(crate) fn free_terms(&self) -> Vec<Term> {
        let mut out = Vec::new();
        for fl in &self.factors {
            for i in 0..fl.len {
                if fl.held[i].is_none() {
                    out.push(fl.factor.term(i + 1));
                }
            }
        }
        out
    }
}

/// Allocation-free admissibility check of `1 − Σ(sign·c_i)B^i` by the step-down
/// recursion ([`lag::step_down_in_place`]).
fn admissible_with(c: &[f64], sign: f64, a: &mut Vec<f64>, b: &mut Vec<f64>) -> bool {
    a.clear();
    a.extend(c.iter().map(|v| sign * v));
    b.resize(c.len(), 0.0);
    lag::step_down_in_place(a, b)
}

/// Which objective.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum ObjectiveKind {
    Conditional,
    Exact,
}

/// Reusable evaluation workspace: one per worker, reused across fits of any shape.
#[derive(Debug, Default, Clone)]
pub(crate) struct EvalWorkspace {
    kalman: KalmanWorkspace,
    coefs: FactorCoefficients,
    phi: Vec<f64>,
    theta: Vec<f64>,
    ar_nz: Vec<(usize, f64)>,
    ma_nz: Vec<(usize, f64)>,
    cross: Vec<f64>,
    gram: Vec<f64>,
    rhs: Vec<f64>,
    kappa: Vec<f64>,
    tmp: Vec<f64>,
    fill: Vec<f64>,
    css_innov: Vec<f64>,
    pub scratch_coefs: FactorCoefficients,
    pub scratch_eval: Evaluation,
    /// Batch evaluation: one filter per lane (run up to its direct phase), per-lane
    /// cross-products, and points/values scratch.
    lane_filters: Vec<KalmanWorkspace>,
    lane_cross: Vec<f64>,
    pub batch_coefs: Vec<FactorCoefficients>,
    pub batch_values: Vec<Option<(f64, usize)>>,
    pub batch_slots: Vec<Option<usize>>,
    /// Scratch of the analytic CSS gradient.
    css_grad: css_gradient::CssGradientScratch,
    /// Scratch of the exact score (the filter's adjoint).
    exact_score: exact_score::ExactScoreScratch,
}

/// How a lane of a batch ended its pre-phase.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum LaneStatus {
    /// Continues in the lanes kernel from its start time.
    Active,
    /// The whole series fit in the prefix: nothing left to run.
    Done,
    /// The model is not admissible for the filter.
    Failed,
}

/// Result of one objective evaluation.
#[derive(Debug, Clone, Default)]
pub(crate) struct Evaluation {
    pub neg_log_likelihood: f64,
    pub innovation_variance: f64,
    pub beta: Vec<f64>,
    pub used: usize,
}

impl EvalWorkspace {
    /// Heap bytes held by this workspace (filters, lanes and scratch included).
    pub(crate) fn heap_bytes(&self) -> usize {
        use crate::base::vec_bytes as b;
        let coefs = |c: &FactorCoefficients| Factor::ALL.iter().map(|f| b(c.of(*f))).sum::<usize>();
        self.kalman.heap_bytes()
            + coefs(&self.coefs)
            + b(&self.phi)
            + b(&self.theta)
            + b(&self.ar_nz)
            + b(&self.ma_nz)
            + b(&self.cross)
            + b(&self.gram)
            + b(&self.rhs)
            + b(&self.kappa)
            + b(&self.tmp)
            + b(&self.fill)
            + b(&self.css_innov)
            + coefs(&self.scratch_coefs)
            + b(&self.scratch_eval.beta)
            + b(&self.lane_filters)
            + self
                .lane_filters
                .iter()
                .map(KalmanWorkspace::heap_bytes)
                .sum::<usize>()
            + b(&self.lane_cross)
            + b(&self.batch_coefs)
            + self.batch_coefs.iter().map(coefs).sum::<usize>()
            + b(&self.batch_values)
            + b(&self.batch_slots)
            + self.css_grad.heap_bytes()
            + self.exact_score.heap_bytes()
    }

    /// The innovations of the last single evaluation of `kind` (column-major, one column
    /// per data column) and, for the exact objective, their variances `F_t` (σ² = 1).
    pub(crate) fn innovations(&self, kind: ObjectiveKind) -> (&[f64], Option<&[f64]>) {
        match kind {
            ObjectiveKind::Exact => (&self.kalman.innov, Some(&self.kalman.fvar)),
            ObjectiveKind::Conditional => (&self.css_innov, None),
        }
    }

    fn expand(&mut self, c: &FactorCoefficients, period: usize) {
        c.expand_into(period, &mut self.phi, &mut self.theta);
        lag::nonzero_lags(&self.phi, &mut self.ar_nz);
        lag::nonzero_lags(&self.theta, &mut self.ma_nz);
    }

    /// Evaluate the objective at natural coefficients `c`. With `beta` given, the
    /// regression coefficients are fixed there; otherwise they are profiled by GLS.
    pub(crate) fn evaluate(
        &mut self,
        prep: &Prepared,
        bp: &Blueprint,
        c: &FactorCoefficients,
        kind: ObjectiveKind,
        beta: Option<&[f64]>,
        out: &mut Evaluation,
    ) -> Result<()> {
        self.expand(c, bp.period);
        let k = prep.ncols;
        self.cross.clear();
        self.cross.resize(k * k, 0.0);
        let (log_det, used) = match kind {
            ObjectiveKind::Exact => {
                self.kalman.set_model(&self.phi, &self.theta)?;
                let tot = self.kalman.pass(&prep.data, prep.n, k, &mut self.cross);
                (tot.log_det, tot.used)
            }
            ObjectiveKind::Conditional => (0.0, self.css_pass(prep)),
        };
        self.finish(prep, k, log_det, used, beta, out)
    }

    /// Evaluate several points: `values[i]` = `(−log L, readings used)` for
    /// `points[i]`, `None` where the evaluation failed. Points run side by side in lanes
    /// (see [`crate::filter::lanes`]) when the shape allows; each value is bitwise the one
    /// [`Self::evaluate`] gives. Allocation-free once the workspace has grown.
    pub(crate) fn evaluate_batch(
        &mut self,
        prep: &Prepared,
        bp: &Blueprint,
        points: &[FactorCoefficients],
        kind: ObjectiveKind,
        values: &mut Vec<Option<(f64, usize)>>,
    ) {
        values.clear();
        let (pn, qn) = bp.expanded_degrees();
        // Measured (benches/estimation.rs, `*_batch8`): lanes pay 1.6–1.7× per point for
        // the exact likelihood up to ARMA(3,2) and for CSS up to ARMA(2,1), but CSS at
        // ARMA(3,2) runs out of registers and loses 8%; CSS lanes stop at p + q = 4.
        let lanes_ok = points.len() > 1
            && !prep.has_missing
            && crate::filter::lanes::fits(pn, qn, prep.ncols)
            && (kind == ObjectiveKind::Exact || pn + qn <= 4);
        if !lanes_ok {
            let mut out = std::mem::take(&mut self.scratch_eval);
            for c in points {
                let r = self.evaluate(prep, bp, c, kind, None, &mut out);
                values.push(r.ok().map(|()| (out.neg_log_likelihood, out.used)));
            }
            self.scratch_eval = out;
            return;
        }
        for chunk in points.chunks(crate::filter::lanes::MAX_LANES) {
            self.evaluate_lanes(prep, bp, chunk, kind, values);
        }
    }

    /// One chunk of at most `MAX_LANES` points of a lanes-capable shape.
    fn evaluate_lanes(
        &mut self,
        prep: &Prepared,
        bp: &Blueprint,
        chunk: &[FactorCoefficients],
        kind: ObjectiveKind,
        values: &mut Vec<Option<(f64, usize)>>,
    ) {
        use crate::filter::lanes::{Lane, MAX_LANES};
        let (n, k) = (prep.n, prep.ncols);
        let (pn, qn) = bp.expanded_degrees();
        let kk = k * k;
        let mut lanes = [Lane::default(); MAX_LANES];
        let mut start = [0usize; MAX_LANES];
        let mut status = [LaneStatus::Active; MAX_LANES];
        let mut log_det = [0.0f64; MAX_LANES];
        let mut used = [0usize; MAX_LANES];
        if self.lane_cross.len() < MAX_LANES * kk {
            self.lane_cross.resize(MAX_LANES * kk, 0.0);
        }
        self.lane_cross[..MAX_LANES * kk].fill(0.0);
        match kind {
            ObjectiveKind::Conditional => {
                let cond = pn.min(n);
                for (l, c) in chunk.iter().enumerate() {
                    self.expand(c, bp.period);
                    lanes[l] = self.css_lane();
                    start[l] = cond;
                    used[l] = 0;
                }
            }
            ObjectiveKind::Exact => {
                if self.lane_filters.len() < MAX_LANES {
                    self.lane_filters
                        .resize(MAX_LANES, KalmanWorkspace::default());
                }
                let mut active = [false; MAX_LANES];
                for (l, c) in chunk.iter().enumerate() {
                    self.expand(c, bp.period);
                    if self.lane_filters[l]
                        .set_model(&self.phi, &self.theta)
                        .is_err()
                    {
                        status[l] = LaneStatus::Failed;
                        continue;
                    }
                    active[l] = true;
                }
                let reached = crate::filter::kalman::run_to_direct_phase(
                    &mut self.lane_filters[..chunk.len()],
                    &active[..chunk.len()],
                    &prep.data,
                    n,
                    k,
                    &mut self.lane_cross,
                );
                for l in (0..chunk.len()).filter(|&l| active[l]) {
                    let DirectPhase { totals, rest } = reached[l];
                    log_det[l] = totals.log_det;
                    used[l] = totals.used;
                    match rest {
                        Some((t, lane)) => {
                            lanes[l] = lane;
                            start[l] = t;
                        }
                        None => status[l] = LaneStatus::Done,
                    }
                }
            }
        }
        // Bring every active lane to the latest start, then run them side by side.
        let active = |s: LaneStatus| s == LaneStatus::Active;
        let t0 = (0..chunk.len())
            .filter(|&l| active(status[l]))
            .map(|l| start[l])
            .max()
            .unwrap_or(n);
        let mut set = [Lane::default(); MAX_LANES];
        let mut slot = [0usize; MAX_LANES];
        let mut count = 0;
        for l in 0..chunk.len() {
            if !active(status[l]) {
                continue;
            }
            crate::filter::lanes::run(
                &prep.data,
                n,
                k,
                pn,
                qn,
                start[l],
                t0,
                std::slice::from_mut(&mut lanes[l]),
                None,
            );
            set[count] = lanes[l];
            slot[count] = l;
            count += 1;
        }
        crate::filter::lanes::run(&prep.data, n, k, pn, qn, t0, n, &mut set[..count], None);
        for (j, lane) in set[..count].iter().enumerate() {
            let l = slot[j];
            let cross = &mut self.lane_cross[l * kk..(l + 1) * kk];
            add_lane_sums(lane, k, cross);
            used[l] += n - start[l];
        }
        let mut out = std::mem::take(&mut self.scratch_eval);
        for l in 0..chunk.len() {
            let r = match status[l] {
                LaneStatus::Failed => None,
                LaneStatus::Active | LaneStatus::Done => {
                    self.cross.clear();
                    self.cross
                        .extend_from_slice(&self.lane_cross[l * kk..(l + 1) * kk]);
                    self.finish(prep, k, log_det[l], used[l], None, &mut out)
                        .ok()
                        .map(|()| (out.neg_log_likelihood, out.used))
                }
            };
            values.push(r);
        }
        self.scratch_eval = out;
    }

    /// Profile the regression by GLS from `self.cross` (upper triangle accumulated),
    /// concentrate σ², and write the evaluation.
    fn finish(
        &mut self,
        prep: &Prepared,
        k: usize,
        log_det: f64,
        used: usize,
        beta: Option<&[f64]>,
        out: &mut Evaluation,
    ) -> Result<()> {
        if used == 0 {
            return Err(Error::numerical("fit", "no readings left in the objective"));
        }
        // Symmetrise the cross-product matrix (upper triangle was accumulated).
        for i in 0..k {
            for j in 0..i {
                self.cross[i * k + j] = self.cross[j * k + i];
            }
        }
        let nr = k - 1;
        out.beta.clear();
        match beta {
            Some(b) => out
                .beta
                .extend(b.iter().zip(&prep.beta_offset).map(|(b, o)| b - o)),
            None if nr > 0 => {
                self.gram.clear();
                self.rhs.clear();
                for i in 1..k {
                    for j in 1..k {
                        self.gram.push(self.cross[i * k + j]);
                    }
                    self.rhs.push(self.cross[i * k]);
                }
                if !linalg::cholesky_solve(&mut self.gram, &mut self.rhs, nr) {
                    return Err(Error::numerical(
                        "fit",
                        "regression columns are collinear after filtering",
                    ));
                }
                out.beta.extend_from_slice(&self.rhs);
            }
            None => {}
        }
        // SS(β) = S_yy − 2βᵀS_Xy + βᵀS_XXβ
        let mut ss = self.cross[0];
        for i in 0..nr {
            ss -= 2.0 * out.beta[i] * self.cross[(i + 1) * k];
            for j in 0..nr {
                ss += out.beta[i] * out.beta[j] * self.cross[(i + 1) * k + j + 1];
            }
        }
        for (b, o) in out.beta.iter_mut().zip(&prep.beta_offset) {
            *b += o;
        }
        let m = used as f64;
        let ss = ss.max(f64::MIN_POSITIVE * m);
        let s2 = ss / m;
        out.innovation_variance = s2;
        out.used = used;
        out.neg_log_likelihood = 0.5 * (m * (2.0 * std::f64::consts::PI * s2).ln() + m + log_det);
        if !out.neg_log_likelihood.is_finite() {
            return Err(Error::numerical("fit", "log-likelihood is not finite"));
        }
        Ok(())
    }

    /// The CSS lane for the expanded coefficients in `phi`/`theta` (lengths ≤ 3).
    fn css_lane(&self) -> crate::filter::lanes::Lane {
        let mut lane = crate::filter::lanes::Lane::default();
        lane.phi[..self.phi.len()].copy_from_slice(&self.phi);
        lane.theta[..self.theta.len()].copy_from_slice(&self.theta);
        lane
    }

    /// CSS residual pass over all columns into `css_innov`; accumulates `cross`.
    fn css_pass(&mut self, prep: &Prepared) -> usize {
        let n = prep.n;
        let k = prep.ncols;
        let cond = self.phi.len().min(n);
        // Every entry is written below (zeros before `cond`, residuals after).
        if self.css_innov.len() != k * n {
            self.css_innov.resize(k * n, 0.0);
        }
        if prep.has_missing {
            // Missing readings are replaced by predictions: work on a copy.
            self.fill.clear();
            self.fill.extend_from_slice(&prep.data);
        }
        if !prep.has_missing && crate::filter::lanes::fits(self.phi.len(), self.theta.len(), k) {
            // Small shapes: the lanes kernel from the end of the conditioning stretch,
            // pre-sample residuals zero (they are the lane's initial history).
            for c in 0..k {
                self.css_innov[c * n..c * n + cond].fill(0.0);
            }
            let mut lane = [self.css_lane()];
            crate::filter::lanes::run(
                &prep.data,
                n,
                k,
                self.phi.len(),
                self.theta.len(),
                cond,
                n,
                &mut lane,
                Some(&mut self.css_innov[..k * n]),
            );
            add_lane_sums(&lane[0], k, &mut self.cross);
            return n - cond;
        }
        let max_ma = self.ma_nz.last().map_or(0, |e| e.0);
        for c in 0..k {
            let v = &mut self.css_innov[c * n..(c + 1) * n];
            if prep.has_missing {
                let w = &mut self.fill[c * n..(c + 1) * n];
                let data = &prep.data[..n];
                for t in 0..cond {
                    v[t] = 0.0;
                    if data[t].is_nan() {
                        w[t] = 0.0;
                    }
                }
                // The guard on pre-sample residuals matters only before the longest MA
                // lag; past it the same sums run unguarded.
                let guarded_end = (cond.max(max_ma)).min(n);
                for t in cond..n {
                    let pred = if t < guarded_end {
                        guarded_prediction(w, v, t, &self.ar_nz, &self.ma_nz)
                    } else {
                        let mut pred = 0.0;
                        for &(i, a) in &self.ar_nz {
                            pred += a * w[t - i];
                        }
                        for &(j, b) in &self.ma_nz {
                            pred += b * v[t - j];
                        }
                        pred
                    };
                    if data[t].is_nan() {
                        v[t] = 0.0;
                        w[t] = pred;
                    } else {
                        v[t] = w[t] - pred;
                    }
                }
            } else {
                let w = &prep.data[c * n..(c + 1) * n];
                for x in v[..cond].iter_mut() {
                    *x = 0.0;
                }
                let guarded_end = (cond.max(max_ma)).min(n);
                for t in cond..guarded_end {
                    let pred = guarded_prediction(w, v, t, &self.ar_nz, &self.ma_nz);
                    v[t] = w[t] - pred;
                }
                direct_recursion(w, v, guarded_end, n, &self.ar_nz, &self.ma_nz);
            }
        }
        if !prep.has_missing {
            for i in 0..k {
                for j in i..k {
                    self.cross[i * k + j] += segment_dot(
                        &self.css_innov[i * n + cond..(i + 1) * n],
                        &self.css_innov[j * n + cond..(j + 1) * n],
                    );
                }
            }
            return n - cond;
        }
        let mut used = 0;
        for t in cond..n {
            if prep.data[t].is_nan() {
                continue;
            }
            used += 1;
            for i in 0..k {
                let vi = self.css_innov[i * n + t];
                for j in i..k {
                    self.cross[i * k + j] += vi * self.css_innov[j * n + t];
                }
            }
        }
        used
    }
}

/// One-step CSS prediction at `t ≥ p` with pre-sample residuals taken as zero:
/// `Σφ_i w_{t−i} + Σ_{j ≤ t} θ_j v_{t−j}`.
#[inline]
fn guarded_prediction(
    w: &[f64],
    v: &[f64],
    t: usize,
    ar_nz: &[(usize, f64)],
    ma_nz: &[(usize, f64)],
) -> f64 {
    let mut pred = 0.0;
    for &(i, a) in ar_nz {
        pred += a * w[t - i];
    }
    for &(j, b) in ma_nz {
        if t >= j {
            pred += b * v[t - j];
        }
    }
    pred
}

/// Why an optimisation stage stopped.
#[non_exhaustive]
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum StopReason {
    /// The gradient norm fell below the tolerance.
    GradientSmall,
    /// The objective stopped changing (relative change below machine precision) while
    /// the gradient test failed, and restarting did not cure it: not converged.
    ObjectiveStalled,
    /// The objective stopped changing and, although the gradient is above the tolerance,
    /// the predicted further gain at the reported point (from the quasi-Newton curvature)
    /// is below 1e-6 in log-likelihood: converged.
    GainNegligible,
    /// The iteration cap was reached.
    IterationCap,
    /// The line search could not make progress; the best point found is reported.
    LineSearchStuck,
    /// Every coefficient was held or there were none to estimate.
    NothingToEstimate,
}

impl std::fmt::Display for StopReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            StopReason::GradientSmall => "gradient below tolerance",
            StopReason::ObjectiveStalled => "objective stopped changing short of the optimum",
            StopReason::GainNegligible => "predicted further gain negligible",
            StopReason::IterationCap => "iteration cap reached",
            StopReason::LineSearchStuck => "line search could not improve",
            StopReason::NothingToEstimate => "nothing to estimate",
        })
    }
}

/// What one optimisation stage did.
#[derive(Debug, Clone, Copy, PartialEq, serde::Serialize, serde::Deserialize)]
#[non_exhaustive]
pub struct StageRecord {
    /// Objective of this stage.
    pub exact: bool,
    /// Iterations of the quasi-Newton method.
    pub iterations: usize,
    /// Objective evaluations: a central-difference gradient counts its 2k evaluations,
    /// an analytic CSS gradient one, an exact score by the filter's adjoint three (its
    /// measured cost).
    pub evaluations: usize,
    /// Euclidean norm of the gradient of `−log L / n` at the reported point.
    pub gradient_norm: f64,
    /// Why the stage stopped.
    pub reason: StopReason,
}

impl StageRecord {
    /// Whether the stage met its convergence criterion.
    pub fn converged(&self) -> bool {
        matches!(
            self.reason,
            StopReason::GradientSmall | StopReason::GainNegligible | StopReason::NothingToEstimate
        )
    }
}

/// What one exact score by the adjoint counts for in a stage's evaluations: its measured
/// cost in objective evaluations (2.4–4.1, see [`Objective::adjoint_pays`]).
const ADJOINT_EVALUATIONS: usize = 3;

/// The optimiser's view of the problem (the one trait boundary to argmin).
struct Objective<'a> {
    prep: &'a Prepared,
    bp: &'a Blueprint,
    layout: &'a Layout,
    kind: ObjectiveKind,
    ws: &'a RefCell<EvalWorkspace>,
    evals: &'a Cell<usize>,
    budget: usize,
    /// Objective values asked for since the last gradient (the line search's tries).
    tries: &'a Cell<usize>,
    best: &'a RefCell<(f64, Vec<f64>)>,
    eval_out: &'a RefCell<Evaluation>,
}

impl Objective<'_> {
    fn value(&self, x: &[f64]) -> f64 {
        self.evals.set(self.evals.get() + 1);
        let mut ws = self.ws.borrow_mut();
        let ws = &mut *ws;
        let mut coefs = std::mem::take(&mut ws.coefs);
        let ok = self
            .layout
            .natural(x, &mut coefs, &mut ws.kappa, &mut ws.tmp);
        let v = if ok {
            let mut out = self.eval_out.borrow_mut();
            match ws.evaluate(self.prep, self.bp, &coefs, self.kind, None, &mut out) {
                Ok(()) => out.neg_log_likelihood / out.used as f64,
                Err(_) => f64::INFINITY,
            }
        } else {
            f64::INFINITY
        };
        ws.coefs = coefs;
        if v.is_finite() {
            let mut best = self.best.borrow_mut();
            if v < best.0 {
                best.0 = v;
                best.1.clear();
                best.1.extend_from_slice(x);
            }
        }
        // Large finite penalty keeps the line search's interpolation defined.
        if v.is_finite() { v } else { 1e30 }
    }

    /// Objective values at several coordinate points, evaluated together (lanes where
    /// the shape allows). Inadmissible or failed points get the finite penalty.
    fn values(&self, points: &[Vec<f64>]) -> Vec<f64> {
        self.evals.set(self.evals.get() + points.len());
        let mut ws = self.ws.borrow_mut();
        let ws = &mut *ws;
        let mut coefs = std::mem::take(&mut ws.batch_coefs);
        let mut vals = std::mem::take(&mut ws.batch_values);
        if coefs.len() < points.len() {
            coefs.resize(points.len(), FactorCoefficients::default());
        }
        // Admissible points go to the batch; `place[i]` is point i's batch slot.
        let mut place = vec![None; points.len()];
        let mut m = 0;
        for (i, x) in points.iter().enumerate() {
            if self
                .layout
                .natural(x, &mut coefs[m], &mut ws.kappa, &mut ws.tmp)
            {
                place[i] = Some(m);
                m += 1;
            }
        }
        ws.evaluate_batch(self.prep, self.bp, &coefs[..m], self.kind, &mut vals);
        let out: Vec<f64> = place
            .iter()
            .map(|slot| {
                slot.and_then(|j| vals[j])
                    .map(|(nll, used)| nll / used as f64)
                    .filter(|v| v.is_finite())
                    .unwrap_or(f64::INFINITY)
            })
            .collect();
        ws.batch_coefs = coefs;
        ws.batch_values = vals;
        let mut best = self.best.borrow_mut();
        for (x, &v) in points.iter().zip(&out) {
            if v < best.0 {
                best.0 = v;
                best.1.clear();
                best.1.extend_from_slice(x);
            }
        }
        out.into_iter()
            .map(|v| if v.is_finite() { v } else { 1e30 })
            .collect()
    }

    /// The gradient at `x`: analytic for the CSS objective where the lanes cannot batch
    /// the central differences (larger or seasonal shapes, several regression columns),
    /// else central differences, their 2k points evaluated as one batch.
    fn gradient_at(&self, x: &[f64]) -> Vec<f64> {
        if self.kind == ObjectiveKind::Conditional
            && !self.prep.has_missing
            && !self.lanes_batch_css()
            && let Some(g) = self.css_gradient_at(x)
        {
            return g;
        }
        if self.kind == ObjectiveKind::Exact
            && !self.prep.has_missing
            && self.adjoint_pays(x.len())
            && let Some(g) = self.exact_gradient_at(x)
        {
            return g;
        }
        self.central_gradient_at(x)
    }

    /// Whether the exact score by the filter's adjoint costs less than central
    /// differences at `k` coordinates. Measured (release build, one core, evaluation
    /// equivalents per gradient): the adjoint 2.4–3.3 for seasonal shapes and 3.2–4.1 for
    /// small ARMA shapes; central differences 2k single evaluations, or ≈ 0.6–0.7 per
    /// point where the lanes batch them (ARMA(1,1): 2.8, ARMA(2,2): 4.2, ARMA(3,3): 7.4).
    fn adjoint_pays(&self, k: usize) -> bool {
        let (p, q) = self.bp.expanded_degrees();
        let lanes = crate::filter::lanes::fits(p, q, self.prep.ncols);
        k >= if lanes { 4 } else { 2 }
    }

    /// The exact objective's gradient by the filter's adjoint (see [`exact_score`]),
    /// counted as [`ADJOINT_EVALUATIONS`] evaluations.
    fn exact_gradient_at(&self, x: &[f64]) -> Option<Vec<f64>> {
        self.evals.set(self.evals.get() + ADJOINT_EVALUATIONS);
        let mut ws = self.ws.borrow_mut();
        let mut out = self.eval_out.borrow_mut();
        ws.exact_gradient(self.prep, self.bp, self.layout, x, &mut out)
    }

    /// Whether a CSS batch at this shape runs in lanes (then central differences cost
    /// about one pass).
    fn lanes_batch_css(&self) -> bool {
        let (p, q) = self.bp.expanded_degrees();
        crate::filter::lanes::fits(p, q, self.prep.ncols)
    }

    /// The analytic CSS gradient in the optimiser's coordinates: one evaluation and the
    /// derivative recursions ([`css_gradient`]) give `∂F/∂c` in natural coefficients,
    /// and the map from coordinates to coefficients (cheap: no data) is differentiated
    /// by central differences. `None` where the point or a neighbour is inadmissible.
    fn css_gradient_at(&self, x: &[f64]) -> Option<Vec<f64>> {
        let k = x.len();
        self.evals.set(self.evals.get() + 1);
        let mut ws = self.ws.borrow_mut();
        let ws = &mut *ws;
        let mut coefs = std::mem::take(&mut ws.coefs);
        let mut grad = std::mem::take(&mut ws.scratch_coefs);
        let ok = self
            .layout
            .natural(x, &mut coefs, &mut ws.kappa, &mut ws.tmp)
            && {
                let mut out = self.eval_out.borrow_mut();
                ws.evaluate(self.prep, self.bp, &coefs, self.kind, None, &mut out)
                    .is_ok()
                    && ws.css_coefficient_gradient(
                        self.prep,
                        &coefs,
                        self.bp.period,
                        &out,
                        &mut grad,
                    )
            };
        let mut result = None;
        if ok {
            let mut g = vec![0.0; k];
            let mut plus = FactorCoefficients::default();
            let mut minus = FactorCoefficients::default();
            let mut z = x.to_vec();
            let mut admissible = true;
            for i in 0..k {
                let h = 1e-6 * x[i].abs().max(1.0);
                z[i] = x[i] + h;
                let up = self
                    .layout
                    .natural(&z, &mut plus, &mut ws.kappa, &mut ws.tmp);
                z[i] = x[i] - h;
                let down = self
                    .layout
                    .natural(&z, &mut minus, &mut ws.kappa, &mut ws.tmp);
                z[i] = x[i];
                if !(up && down) {
                    admissible = false;
                    break;
                }
                g[i] = Factor::ALL
                    .iter()
                    .flat_map(|&f| {
                        let (a, b, d) = (plus.of(f), minus.of(f), grad.of(f));
                        a.iter()
                            .zip(b)
                            .zip(d)
                            .map(|((a, b), d)| d * (a - b) / (2.0 * h))
                    })
                    .sum();
            }
            if admissible && g.iter().all(|v| v.is_finite()) {
                result = Some(g);
            }
        }
        ws.coefs = coefs;
        ws.scratch_coefs = grad;
        result
    }

    /// Central-difference gradient; its 2k points are evaluated as one batch.
    fn central_gradient_at(&self, x: &[f64]) -> Vec<f64> {
        let k = x.len();
        let steps: Vec<f64> = x.iter().map(|v| 1e-5 * v.abs().max(1.0)).collect();
        let mut points = Vec::with_capacity(2 * k);
        for i in 0..k {
            for sign in [1.0, -1.0] {
                let mut p = x.to_vec();
                p[i] = x[i] + sign * steps[i];
                points.push(p);
            }
        }
        let f = self.values(&points);
        (0..k)
            .map(|i| {
                let (fp, fm) = (f[2 * i], f[2 * i + 1]);
                if fp >= 1e30 || fm >= 1e30 {
                    0.0
                } else {
                    (fp - fm) / (2.0 * steps[i])
                }
            })
            .collect()
    }
}

impl Objective<'_> {
    /// Inverse of a central-difference Hessian of the objective at `x`, if positive
    /// definite. All `2k² + 1` points are evaluated as one batch.
    fn inverse_hessian_at(&self, x: &[f64]) -> Option<Vec<Vec<f64>>> {
        let k = x.len();
        let h: Vec<f64> = x.iter().map(|v| 1e-4 * v.abs().max(1.0)).collect();
        let stencil = hessian_stencil(k);
        let points: Vec<Vec<f64>> = stencil
            .iter()
            .map(|offsets| {
                let mut z = x.to_vec();
                for &(i, s) in offsets.iter().flatten() {
                    z[i] += s * h[i];
                }
                z
            })
            .collect();
        let f = self.values(&points);
        let hess = hessian_from_stencil(k, &f, &h);
        if hess.iter().any(|v| !v.is_finite() || v.abs() >= 1e29) {
            return None;
        }
        let inv = linalg::invert_spd(&hess, k)?;
        Some((0..k).map(|i| inv[i * k..(i + 1) * k].to_vec()).collect())
    }
}

/// The points of a central-difference Hessian in `k` coordinates, as up to two
/// `(coordinate, ±1)` offsets each: the centre, `±e_i`, then for `j < i` the four
/// corners `(+,+), (+,−), (−,−), (−,+)`.
type StencilPoint = [Option<(usize, f64)>; 2];

fn hessian_stencil(k: usize) -> Vec<StencilPoint> {
    let mut pts: Vec<StencilPoint> = vec![[None, None]];
    for i in 0..k {
        pts.push([Some((i, 1.0)), None]);
        pts.push([Some((i, -1.0)), None]);
    }
    for i in 0..k {
        for j in 0..i {
            for (si, sj) in [(1.0, 1.0), (1.0, -1.0), (-1.0, -1.0), (-1.0, 1.0)] {
                pts.push([Some((i, si)), Some((j, sj))]);
            }
        }
    }
    pts
}

/// The Hessian (row-major) from values at [`hessian_stencil`] points with steps `h`.
fn hessian_from_stencil(k: usize, f: &[f64], h: &[f64]) -> Vec<f64> {
    let f0 = f[0];
    let mut hess = vec![0.0; k * k];
    for i in 0..k {
        let (fp, fm) = (f[1 + 2 * i], f[2 + 2 * i]);
        hess[i * k + i] = (fp - 2.0 * f0 + fm) / (h[i] * h[i]);
    }
    let mut at = 1 + 2 * k;
    for i in 0..k {
        for j in 0..i {
            let (fpp, fpm, fmm, fmp) = (f[at], f[at + 1], f[at + 2], f[at + 3]);
            at += 4;
            let v = (fpp - fpm - fmp + fmm) / (4.0 * h[i] * h[j]);
            hess[i * k + j] = v;
            hess[j * k + i] = v;
        }
    }
    hess
}

impl CostFunction for Objective<'_> {
    type Param = Vec<f64>;
    type Output = f64;
    fn cost(&self, x: &Self::Param) -> std::result::Result<f64, argmin::core::Error> {
        // A hard evaluation budget per stage: a line search that cannot make progress
        // (e.g. against the penalty of an inadmissible region) is stopped here, and the
        // best point found so far is reported with the stop reason.
        if self.evals.get() >= self.budget {
            return Err(argmin::core::Error::msg("evaluation budget exhausted"));
        }
        // Backtracking halves the step each try. After `MAX_TRIES` the trial step is
        // below 2⁻⁶⁰ of the quasi-Newton step: a finite direction no longer moves the
        // point, and an infinite one (a broken carried curvature) never becomes
        // admissible. Stop the line search there (the run restarts from the best point
        // with a fresh inverse Hessian) instead of spending the whole budget on it.
        const MAX_TRIES: usize = 60;
        self.tries.set(self.tries.get() + 1);
        if self.tries.get() > MAX_TRIES {
            return Err(argmin::core::Error::msg("line search made no progress"));
        }
        Ok(self.value(x))
    }
}

impl Gradient for Objective<'_> {
    type Param = Vec<f64>;
    type Gradient = Vec<f64>;
    fn gradient(&self, x: &Self::Param) -> std::result::Result<Vec<f64>, argmin::core::Error> {
        self.tries.set(0);
        Ok(self.gradient_at(x))
    }
}

/// Best coordinates, the stage record, and the final quasi-Newton inverse Hessian.
pub(crate) type StageOutcome = (Vec<f64>, StageRecord, Option<Vec<Vec<f64>>>);

/// Minimise the objective from coordinates `x0`. Returns the best coordinates and record.
pub(crate) fn minimise(
    prep: &Prepared,
    bp: &Blueprint,
    layout: &Layout,
    kind: ObjectiveKind,
    ws: &RefCell<EvalWorkspace>,
    x0: Vec<f64>,
    inv_hessian0: Option<Vec<Vec<f64>>>,
) -> Result<StageOutcome> {
    let evals = Cell::new(0);
    let tries = Cell::new(0);
    let best = RefCell::new((f64::INFINITY, x0.clone()));
    let eval_out = RefCell::new(Evaluation::default());
    let obj = Objective {
        prep,
        bp,
        layout,
        kind,
        ws,
        evals: &evals,
        budget: bp.max_iterations * (2 * x0.len() * x0.len() + 4 * x0.len() + 30),
        tries: &tries,
        best: &best,
        eval_out: &eval_out,
    };
    let f0 = obj.value(&x0);
    if !(f0 < 1e30) {
        return Err(Error::numerical(
            "fit",
            "the objective is not finite at the starting values",
        ));
    }
    if layout.free_len == 0 {
        return Ok((
            x0,
            StageRecord {
                exact: kind == ObjectiveKind::Exact,
                iterations: 0,
                evaluations: evals.get(),
                gradient_norm: 0.0,
                reason: StopReason::NothingToEstimate,
            },
            None,
        ));
    }
    let k = layout.free_len;
    let max_iter = bp.max_iterations;
    let mut iterations = 0usize;
    let mut reason = StopReason::IterationCap;
    let mut gradient_norm = f64::INFINITY;
    // BFGS with an Armijo backtracking line search: one gradient per iteration and
    // usually one or two objective values. A BFGS update can lose positive definiteness
    // with numerical gradients; the run is then restarted from the best point with a
    // fresh inverse Hessian (at most three restarts).
    // Without a carried curvature, start BFGS from the inverse of a finite-difference
    // Hessian at the starting point when that is cheap (k ≤ 6: 2k² + 1 evaluations);
    // ARMA objectives are often ill-conditioned and an identity start wastes iterations.
    let inv_hessian0 =
        inv_hessian0.or_else(|| (k <= 6).then(|| obj.inverse_hessian_at(&x0)).flatten());
    let mut carried = inv_hessian0.filter(|h| h.len() == k);
    let mut last_inv_hessian = None;
    for _restart in 0..4 {
        tries.set(0);
        let start = best.borrow().1.clone();
        let remaining = max_iter.saturating_sub(iterations);
        if remaining == 0 {
            reason = StopReason::IterationCap;
            break;
        }
        let inv_h = carried.take().unwrap_or_else(|| identity(k));
        let run = run_bfgs(&obj, start, inv_h, remaining, bp.tolerance)?;
        iterations += run.iterations;
        if run.completed {
            last_inv_hessian = run.inv_hessian;
        }
        reason = run.reason;
        let stalled = run.stalled;
        let here = best.borrow().1.clone();
        let g = obj.gradient_at(&here);
        gradient_norm = g.iter().map(|v| v * v).sum::<f64>().sqrt();
        if gradient_norm <= bp.tolerance {
            reason = StopReason::GradientSmall;
            break;
        }
        if reason == StopReason::ObjectiveStalled {
            // The objective stopped changing but the gradient test fails: converged only
            // if the predicted further gain ½ gᵀH⁻¹g (the last quasi-Newton inverse
            // Hessian, at the reported point) is negligible — below 1e-6 in total
            // log-likelihood; otherwise restart from here with a fresh inverse Hessian.
            let per_reading = 1e-6 / prep.n.max(1) as f64;
            let gain = last_inv_hessian
                .as_ref()
                .filter(|h| h.len() == k)
                .map(|h| 0.5 * quadratic_form(h, &g));
            if gain.is_some_and(|d| (0.0..=per_reading).contains(&d)) {
                reason = StopReason::GainNegligible;
                break;
            }
            continue;
        }
        if !stalled {
            break;
        }
    }
    let best = best.borrow().1.clone();
    Ok((
        best,
        StageRecord {
            exact: kind == ObjectiveKind::Exact,
            iterations,
            evaluations: evals.get(),
            gradient_norm,
            reason,
        },
        last_inv_hessian,
    ))
}

/// Hannan–Rissanen starting values (long AR, then least squares on lagged readings and
/// lagged long-AR residuals), pulled inside the admissible region.
pub(crate) fn starting_values(prep: &Prepared, bp: &Blueprint) -> FactorCoefficients {
    // Hannan–Rissanen on at most the last STARTING_SPAN differenced readings: the
    // estimates only have to land in the optimiser's basin (their sampling error there
    // is ≈ 1/√STARTING_SPAN ≈ 0.008), and on longer series the long AR's O(n·m) passes
    // over fresh memory cost as much as several likelihood evaluations.
    let from = prep.n.saturating_sub(STARTING_SPAN);
    let w = deregressed(prep, from);
    let n = w.len();
    let (p, q, sp, sq, s) = (bp.p, bp.q, bp.seasonal_p, bp.seasonal_q, bp.period);
    let mut out = FactorCoefficients::zeros(p, q, sp, sq);
    // (factor, position from 0, lag) of every coefficient.
    let ar_lags: Vec<(Factor, usize, usize)> = (1..=p)
        .map(|i| (Factor::Ar, i - 1, i))
        .chain((1..=sp).map(|i| (Factor::SeasonalAr, i - 1, i * s)))
        .collect();
    let ma_lags: Vec<(Factor, usize, usize)> = (1..=q)
        .map(|i| (Factor::Ma, i - 1, i))
        .chain((1..=sq).map(|i| (Factor::SeasonalMa, i - 1, i * s)))
        .collect();
    if ar_lags.is_empty() && ma_lags.is_empty() {
        return out;
    }
    // Long AR by Durbin–Levinson on the sample autocorrelations.
    let (p_exp, q_exp) = bp.expanded_degrees();
    // Long-AR order: enough to whiten a typical invertible MA part (common practice:
    // a few times ln n beyond the model orders).
    let nlog = (2.0 * (n as f64).ln()).ceil() as usize;
    let m = if ma_lags.is_empty() {
        0
    } else {
        (p_exp.max(q_exp) + nlog).min(n / 3)
    };
    let ehat = long_ar_innovations(&w, m);
    let max_lag = ar_lags
        .iter()
        .chain(&ma_lags)
        .map(|l| l.2)
        .max()
        .unwrap_or(0);
    let start = m + max_lag;
    if start + ar_lags.len() + ma_lags.len() + 2 >= n {
        return out;
    }
    // Held coefficients: subtract their contributions and leave their columns out.
    let mut y: Vec<f64> = w[start..].to_vec();
    let mut cols: Vec<Vec<f64>> = Vec::new();
    let mut slots: Vec<(Factor, usize)> = Vec::new();
    // AR columns are lagged readings, MA columns lagged long-AR innovations.
    let lagged = ar_lags
        .iter()
        .map(|l| (l, &w))
        .chain(ma_lags.iter().map(|l| (l, &ehat)));
    for (&(f, i, lagv), source) in lagged {
        let col: Vec<f64> = (start..n).map(|t| source[t - lagv]).collect();
        match bp.held_value(f.term(i + 1)) {
            Some(v) => y.iter_mut().zip(&col).for_each(|(yi, c)| *yi -= v * c),
            None => {
                cols.push(col);
                slots.push((f, i));
            }
        }
    }
    if let Some((beta, _)) = linalg::least_squares_owned(cols, y) {
        for (b, &(f, i)) in beta.iter().zip(&slots) {
            if b.is_finite() {
                out.of_mut(f)[i] = *b;
            }
        }
    }
    keep_admissible(&mut out, bp);
    out
}

/// The prepared series from reading `from` on, with its regression part (least squares
/// on the present readings there) removed and missing readings set to zero.
fn deregressed(prep: &Prepared, from: usize) -> Vec<f64> {
    let n = prep.n;
    let k = prep.ncols;
    // Remove the regression part by least squares on present readings.
    let mut w: Vec<f64> = prep.data[from..n].to_vec();
    if k > 1 {
        let (cols, y) = present_rows(&prep.data, n, k, from);
        if let Some((beta, _)) = linalg::least_squares_owned(cols, y) {
            for (i, t) in (from..n).enumerate() {
                let mut fit = 0.0;
                for c in 1..k {
                    fit += beta[c - 1] * prep.data[c * n + t];
                }
                w[i] -= fit;
            }
        }
    }
    for v in w.iter_mut() {
        if v.is_nan() {
            *v = 0.0;
        }
    }
    w
}

/// Innovations of a long AR(m) fitted by Durbin–Levinson to the correlogram of `w` (zero
/// for the first `m` readings, and everywhere when `m = 0` or the correlogram fails).
fn long_ar_innovations(w: &[f64], m: usize) -> Vec<f64> {
    let n = w.len();
    let mut ehat = vec![0.0; n];
    if m > 0
        && let Ok(cg) = crate::stats::correlogram::Correlogram::compute(w, m)
    {
        // AR(m) coefficients from the correlogram's partial autocorrelations (kept
        // inside ±0.999) by the Durbin–Levinson map.
        let kappa: Vec<f64> = cg
            .partial_autocorrelations()
            .values()
            .iter()
            .map(|k| k.clamp(-0.999, 0.999))
            .collect();
        let mut a = vec![0.0; m];
        let mut tmp = vec![0.0; m];
        lag::coefficients_from_partials(&kappa, &mut a[..kappa.len()], &mut tmp);
        for t in m..n {
            let mut pred = 0.0;
            for j in 1..=m {
                pred += a[j - 1] * w[t - j];
            }
            ehat[t] = w[t] - pred;
        }
    }
    ehat
}

/// Held values exactly; free factors pulled strictly inside the admissible region
/// (partial autocorrelations at most 0.95 in modulus).
fn keep_admissible(out: &mut FactorCoefficients, bp: &Blueprint) {
    for f in Factor::ALL {
        let coefs = out.of_mut(f);
        let held_all: Vec<Option<f64>> = (1..=coefs.len())
            .map(|i| bp.held_value(f.term(i)))
            .collect();
        for (c, h) in coefs.iter_mut().zip(&held_all) {
            if let Some(v) = h {
                *c = *v;
            }
        }
        let sign = f.step_down_sign();
        let as_ar: Vec<f64> = coefs.iter().map(|v| sign * v).collect();
        let inside = lag::pull_inside(&as_ar, 0.95);
        let pulled: Vec<f64> = inside.iter().map(|v| sign * v).collect();
        // Keep held values exactly; if pulling changed them, fall back to the held set.
        if held_all.iter().all(|h| h.is_none()) {
            *coefs = pulled;
        }
    }
}

/// Admissibility of perturbed coefficients for the numerical Hessians (with its scratch).
#[derive(Default)]
struct AdmissibleCheck {
    a: Vec<f64>,
    b: Vec<f64>,
}

impl AdmissibleCheck {
    /// `c` with its free coefficients replaced by `z`, if every factor stays admissible.
    fn coefficients(
        &mut self,
        layout: &Layout,
        c: &FactorCoefficients,
        z: &[f64],
    ) -> Option<FactorCoefficients> {
        let cc = layout.with_natural_free(c, z);
        for f in Factor::ALL {
            if !admissible_with(cc.of(f), f.step_down_sign(), &mut self.a, &mut self.b) {
                return None;
            }
        }
        Some(cc)
    }

    /// Central-difference steps for the free coefficients `z` of `c`:
    /// `1e-4·max(|z|, 0.1)`, halved while a ±step leaves the admissible region.
    fn steps(&mut self, layout: &Layout, c: &FactorCoefficients, z: &[f64]) -> Vec<f64> {
        let mut h = vec![0.0; z.len()];
        for i in 0..z.len() {
            let mut hi = 1e-4 * z[i].abs().max(0.1);
            for _ in 0..30 {
                let (mut zp, mut zm) = (z.to_vec(), z.to_vec());
                zp[i] += hi;
                zm[i] -= hi;
                if self.coefficients(layout, c, &zp).is_some()
                    && self.coefficients(layout, c, &zm).is_some()
                {
                    break;
                }
                hi *= 0.5;
            }
            h[i] = hi;
        }
        h
    }
}

/// Numerical Hessian of the profile `−log L` (total; regression profiled by GLS, σ²
/// concentrated) over the free natural ARMA coefficients at `c`. Central differences
/// with steps `1e-4·max(|z|, 0.1)`, halved while a step leaves the admissible region.
pub(crate) fn hessian(
    prep: &Prepared,
    bp: &Blueprint,
    layout: &Layout,
    kind: ObjectiveKind,
    ws: &mut EvalWorkspace,
    c: &FactorCoefficients,
) -> Option<Vec<f64>> {
    let z = layout.natural_free(c);
    let k = z.len();
    if k == 0 {
        return Some(Vec::new());
    }
    let mut check = AdmissibleCheck::default();
    let h = check.steps(layout, c, &z);
    // Every stencil point in one batch (lanes where the shape allows).
    let mut points = Vec::new();
    for offsets in hessian_stencil(k) {
        let mut zz = z.clone();
        for &(i, sgn) in offsets.iter().flatten() {
            zz[i] += sgn * h[i];
        }
        points.push(check.coefficients(layout, c, &zz)?);
    }
    let mut vals = Vec::new();
    ws.evaluate_batch(prep, bp, &points, kind, &mut vals);
    let f: Vec<f64> = vals
        .iter()
        .map(|v| v.map(|(nll, _)| nll))
        .collect::<Option<Vec<f64>>>()?;
    Some(hessian_from_stencil(k, &f, &h))
}

/// Numerical Hessian of the full exact `−log L(z, β, σ²)` (nothing profiled or
/// concentrated) over the free natural ARMA coefficients `z` at `c`, the profiled
/// regression coefficients `beta` (scaled units, preliminary offsets included) and the
/// innovation variance `sigma2` (scaled units), in that order. Central differences with
/// steps `1e-4·max(|z|, 0.1)` (halved while a step leaves the admissible region),
/// `1e-4·max(|β|, σ)` and `1e-4·σ²`.
///
/// `−log L = −log L_c(z, β) + (m/2)(ln(σ²/ŝ²) + ŝ²/σ² − 1)`, where `L_c` is the likelihood
/// with σ² concentrated at `ŝ²(z, β) = SS(z, β)/m`: every point is one evaluation.
pub(crate) fn full_hessian(
    prep: &Prepared,
    bp: &Blueprint,
    layout: &Layout,
    ws: &mut EvalWorkspace,
    c: &FactorCoefficients,
    beta: &[f64],
    sigma2: f64,
) -> Option<Vec<f64>> {
    let z0 = layout.natural_free(c);
    let na = z0.len();
    let nb = beta.len();
    let k = na + nb + 1;
    let mut x0 = z0.clone();
    x0.extend_from_slice(beta);
    x0.push(sigma2);
    let mut check = AdmissibleCheck::default();
    let arma_steps = check.steps(layout, c, &z0);
    let sd = sigma2.sqrt();
    let mut h = vec![0.0; k];
    for i in 0..k {
        h[i] = if i < na {
            arma_steps[i]
        } else if i < na + nb {
            1e-4 * x0[i].abs().max(sd)
        } else {
            1e-4 * sigma2
        };
    }
    let mut f = Vec::new();
    let mut out = Evaluation::default();
    for offsets in hessian_stencil(k) {
        let mut x = x0.clone();
        for &(i, sgn) in offsets.iter().flatten() {
            x[i] += sgn * h[i];
        }
        let cc = check.coefficients(layout, c, &x[..na])?;
        ws.evaluate(
            prep,
            bp,
            &cc,
            ObjectiveKind::Exact,
            Some(&x[na..na + nb]),
            &mut out,
        )
        .ok()?;
        let (s2_hat, s2) = (out.innovation_variance, x[k - 1]);
        let m = out.used as f64;
        f.push(out.neg_log_likelihood + 0.5 * m * ((s2 / s2_hat).ln() + s2_hat / s2 - 1.0));
    }
    f.iter()
        .all(|v| v.is_finite())
        .then(|| hessian_from_stencil(k, &f, &h))
}

/// What one BFGS run reports to [`minimise`].
struct BfgsRun {
    /// Whether argmin returned a result (its state is then reported).
    completed: bool,
    iterations: usize,
    inv_hessian: Option<Vec<Vec<f64>>>,
    reason: StopReason,
    /// Whether the run stopped for a reason a restart may cure (a stuck line search).
    stalled: bool,
}

/// One argmin BFGS run with an Armijo backtracking line search from `start` with the
/// inverse Hessian `inv_h`, for at most `max_iters` iterations.
fn run_bfgs(
    obj: &Objective<'_>,
    start: Vec<f64>,
    inv_h: Vec<Vec<f64>>,
    max_iters: usize,
    tolerance: f64,
) -> Result<BfgsRun> {
    let line = ArmijoCondition::new(1e-4)
        .map(BacktrackingLineSearch::new)
        .and_then(|l| l.rho(0.5));
    let solver = line
        .and_then(|l| BFGS::new(l).with_tolerance_grad(tolerance))
        .and_then(|s| s.with_tolerance_cost(1e-15))
        .map_err(|e| Error::numerical("fit", format!("optimiser settings: {e}")))?;
    let helper = Objective { ..*obj };
    let run = Executor::new(helper, solver)
        .configure(|state| {
            state
                .param(start)
                .inv_hessian(inv_h)
                .max_iters(max_iters as u64)
        })
        .run();
    Ok(match &run {
        Ok(res) => {
            let st = res.state();
            let (reason, stalled) = match st.get_termination_status() {
                TerminationStatus::Terminated(TerminationReason::MaxItersReached)
                | TerminationStatus::NotTerminated => (StopReason::IterationCap, false),
                TerminationStatus::Terminated(TerminationReason::SolverConverged) => {
                    (StopReason::ObjectiveStalled, false)
                }
                TerminationStatus::Terminated(_) => (StopReason::LineSearchStuck, true),
            };
            BfgsRun {
                completed: true,
                iterations: st.get_iter() as usize,
                inv_hessian: st.get_inv_hessian().cloned(),
                reason,
                stalled,
            }
        }
        Err(_) => BfgsRun {
            completed: false,
            iterations: 0,
            inv_hessian: None,
            reason: StopReason::LineSearchStuck,
            stalled: true,
        },
    })
}

/// `gᵀ H g` for a matrix given as rows.
fn quadratic_form(h: &[Vec<f64>], g: &[f64]) -> f64 {
    h.iter()
        .zip(g)
        .map(|(row, gi)| gi * row.iter().zip(g).map(|(a, b)| a * b).sum::<f64>())
        .sum()
}

/// The k × k identity as rows.
fn identity(k: usize) -> Vec<Vec<f64>> {
    let mut h = vec![vec![0.0; k]; k];
    for (i, row) in h.iter_mut().enumerate() {
        row[i] = 1.0;
    }
    h
}

/// Coordinates for the optimiser from natural coefficients (None if inadmissible).
pub(crate) fn coordinates(layout: &Layout, c: &FactorCoefficients) -> Option<Vec<f64>> {
    layout.coordinates(c)
}

/// Natural coefficients from optimiser coordinates.
pub(crate) fn natural(
    layout: &Layout,
    x: &[f64],
    ws: &mut EvalWorkspace,
) -> Option<FactorCoefficients> {
    let mut c = FactorCoefficients::default();
    let ok = layout.natural(x, &mut c, &mut ws.kappa, &mut ws.tmp);
    ok.then_some(c)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn differencing_lengths() {
        let x: Vec<f64> = (0..30).map(|t| (t * t) as f64).collect();
        let w = difference(&x, 2, 0, 1);
        assert_eq!(w.len(), 28);
        assert!(w.iter().all(|v| (*v - 2.0).abs() < 1e-12));
        let w = difference(&x, 1, 1, 12);
        assert_eq!(w.len(), 17);
        // (1 − B)(1 − B¹²) t² = 24 for every t (hand algebra).
        assert!(w.iter().all(|v| *v == 24.0), "{w:?}");
        assert!(difference(&x[..5], 0, 1, 12).is_empty());
    }

    /// Starting values of a long series come from its last `STARTING_SPAN` readings and
    /// still land near the simulated coefficients (a misaligned regression column or
    /// lag would not), with the mean column's regression removed on that stretch.
    #[test]
    fn long_series_starting_values_from_the_tail() {
        use crate::model::simulate::Simulator;
        let n = 3 * STARTING_SPAN;
        let x = Simulator::builder()
            .autoregressive(&[0.7])
            .moving_average(&[0.4])
            .level(250.0)
            .build()
            .unwrap()
            .generate(n, 31);
        let bp = Blueprint::builder().nonseasonal(1, 0, 1).build().unwrap();
        let prep = prepare(&bp, &x, &[]).unwrap();
        assert_eq!(prep.ncols, 2);
        let start = starting_values(&prep, &bp);
        assert!((start.ar[0] - 0.7).abs() < 0.05, "{start:?}");
        assert!((start.ma[0] - 0.4).abs() < 0.08, "{start:?}");
        assert_eq!(deregressed(&prep, n - STARTING_SPAN).len(), STARTING_SPAN);
    }
}

#[cfg(test)]
mod batch_tests {
    use super::*;
    use crate::model::simulate::Simulator;

    fn coefs(p: usize, q: usize, phi: f64, theta: f64) -> FactorCoefficients {
        FactorCoefficients {
            ar: (0..p).map(|j| phi / (j + 1) as f64).collect(),
            ma: (0..q).map(|j| theta / (j + 1) as f64).collect(),
            ..Default::default()
        }
    }

    /// Batched values are bitwise the single-point values, on every lane path: active
    /// lanes with different direct-phase starts, an MA root so near the unit circle that
    /// the filter never reaches its direct phase (done in the pre-phase), an
    /// inadmissible point (failed), a series shorter than the lane prefix (done), with
    /// and without the profiled mean, exact and conditional.
    #[test]
    fn batch_values_equal_single_values_bitwise() {
        let sim = Simulator::builder()
            .autoregressive(&[0.7])
            .moving_average(&[0.4])
            .level(3.0)
            .build()
            .unwrap();
        for len in [300, 1500] {
            let x = sim.generate(len, 5);
            for (p, q, mean) in [(1, 1, true), (2, 1, false), (0, 2, true), (3, 3, true)] {
                let bp = Blueprint::builder()
                    .nonseasonal(p, 0, q)
                    .mean_term(mean)
                    .build()
                    .unwrap();
                let prep = prepare(&bp, &x, &[]).unwrap();
                let mut points: Vec<FactorCoefficients> = (0..11)
                    .map(|i| coefs(p, q, 0.5 - 0.04 * i as f64, 0.3 + 0.05 * i as f64))
                    .collect();
                points.push(coefs(p, q, 0.2, -0.9995));
                if p > 0 {
                    points.push(coefs(p, q, 1.5, 0.1));
                }
                for kind in [ObjectiveKind::Exact, ObjectiveKind::Conditional] {
                    let mut ws = EvalWorkspace::default();
                    let mut vals = Vec::new();
                    ws.evaluate_batch(&prep, &bp, &points, kind, &mut vals);
                    assert_eq!(vals.len(), points.len());
                    let mut out = Evaluation::default();
                    for (i, (c, v)) in points.iter().zip(&vals).enumerate() {
                        let single = ws.evaluate(&prep, &bp, c, kind, None, &mut out);
                        match (single, v) {
                            (Ok(()), Some((nll, used))) => {
                                assert_eq!(
                                    nll.to_bits(),
                                    out.neg_log_likelihood.to_bits(),
                                    "n={len} ({p},{q}) mean={mean} {kind:?} point {i}: {nll} vs {}",
                                    out.neg_log_likelihood
                                );
                                assert_eq!(*used, out.used);
                            }
                            (Err(_), None) => {}
                            (s, b) => panic!("point {i}: single {s:?}, batch {b:?}"),
                        }
                    }
                }
            }
        }
    }
}

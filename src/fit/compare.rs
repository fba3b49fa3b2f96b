//! Comparing fitted models: ranking by an information criterion (nested or not) and the
//! likelihood-ratio test for nested models.

use crate::base::dist::chi_square_upper;
use crate::base::error::{Error, ErrorKind, Result};
use crate::fit::fitted::{FittedModel, LogLikelihood};
use crate::stats::criteria::Criterion;

fn refuse(what: &'static str, message: impl Into<String>) -> Error {
    Error::new(ErrorKind::NotComparable {
        what,
        message: message.into(),
    })
}

fn same_data(what: &'static str, a: &FittedModel, b: &FittedModel) -> Result<()> {
    if a.data_fingerprint() != b.data_fingerprint() {
        return Err(refuse(what, "the models were fitted to different readings"));
    }
    let (ba, bb) = (a.blueprint(), b.blueprint());
    if (
        ba.d,
        ba.seasonal_d,
        ba.period * (ba.seasonal_d > 0) as usize,
    ) != (
        bb.d,
        bb.seasonal_d,
        bb.period * (bb.seasonal_d > 0) as usize,
    ) {
        return Err(refuse(
            what,
            format!(
                "differencing differs ({} vs {}); their likelihoods describe different data",
                ba.shape_label(),
                bb.shape_label()
            ),
        ));
    }
    Ok(())
}

fn exact_ll(what: &'static str, m: &FittedModel) -> Result<f64> {
    match m.log_likelihood() {
        LogLikelihood::Exact(v) => Ok(v),
        _ => Err(refuse(
            what,
            format!(
                "{} was fitted by conditional sum of squares, whose likelihood is partial",
                m.blueprint().shape_label()
            ),
        )),
    }
}

/// One entry of a ranking.
#[derive(Debug, Clone, Copy)]
#[non_exhaustive]
pub struct RankedModel<'a> {
    /// The model.
    pub model: &'a FittedModel,
    /// Its criterion value.
    pub value: f64,
    /// Difference to the best value (0 for the best).
    pub delta: f64,
    /// Relative weight `exp(−Δ/2)` normalised over the candidates (Akaike weights).
    pub weight: f64,
}

/// Rank models fitted to the same series by `criterion`, best (smallest) first.
///
/// ```
/// use lagwise::{Blueprint, Criterion, Simulator, rank_by_criterion};
/// # fn main() -> Result<(), lagwise::Error> {
/// let x = Simulator::builder().autoregressive(&[0.7]).build()?.generate(500, 3);
/// let a = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
/// let b = Blueprint::builder().nonseasonal(2, 0, 1).build()?.fit(&x)?;
/// let ranked = rank_by_criterion(&[&a, &b], Criterion::Schwarz)?;
/// assert_eq!(ranked[0].delta, 0.0);
/// # Ok(()) }
/// ```
///
/// Both refuse, with [`ErrorKind::NotComparable`] and a
/// reason, what would be meaningless: conditional (CSS) likelihoods, models fitted to
/// different readings, or models with different differencing (their likelihoods describe
/// different data).
pub fn rank_by_criterion<'a>(
    models: &[&'a FittedModel],
    criterion: Criterion,
) -> Result<Vec<RankedModel<'a>>> {
    const WHAT: &str = "ranking";
    let first = models
        .first()
        .ok_or_else(|| Error::invalid(WHAT, "no models to rank"))?;
    let mut out = Vec::with_capacity(models.len());
    for m in models {
        exact_ll(WHAT, m)?;
        same_data(WHAT, first, m)?;
        let ic = m.criteria()?;
        let value = ic.value(criterion).ok_or_else(|| {
            refuse(
                WHAT,
                format!(
                    "{criterion} is undefined for {} (too few readings for its parameters)",
                    m.blueprint().shape_label()
                ),
            )
        })?;
        out.push(RankedModel {
            model: m,
            value,
            delta: 0.0,
            weight: 0.0,
        });
    }
    out.sort_by(|a, b| a.value.total_cmp(&b.value));
    let best = out[0].value;
    let mut total = 0.0;
    for r in &mut out {
        r.delta = r.value - best;
        r.weight = (-0.5 * r.delta).exp();
        total += r.weight;
    }
    for r in &mut out {
        r.weight /= total;
    }
    Ok(out)
}

/// Result of a likelihood-ratio test of a restricted model inside a general one.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub struct NestedTest {
    /// `2(log L_general − log L_restricted)` (clamped at 0).
    pub statistic: f64,
    /// Number of extra estimated parameters in the general model.
    pub degrees_of_freedom: usize,
    /// Upper-tail chi-square probability.
    pub p_value: f64,
    /// A caveat when the chi-square reference is doubtful (e.g. AR and MA orders raised
    /// together: under the restricted model the extra pair is not identified).
    pub caveat: Option<String>,
}

/// Likelihood-ratio test of `restricted` against `general`.
///
/// Refuses (typed error with the reason) unless both are exact fits to the same readings
/// with the same differencing and `restricted` is a special case of `general`: every order
/// at most the general one's, mean/drift only if the general has them, and every held
/// coefficient of the general model held at the same value in the restricted one.
/// ARMA(1,1) vs AR(2), for instance, is refused: neither contains the other.
///
/// ```
/// use lagwise::{Blueprint, Simulator, nested_likelihood_ratio};
/// # fn main() -> Result<(), lagwise::Error> {
/// let x = Simulator::builder().autoregressive(&[0.5]).build()?.generate(400, 1);
/// let ar1 = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
/// let ar2 = Blueprint::builder().nonseasonal(2, 0, 0).build()?.fit(&x)?;
/// let t = nested_likelihood_ratio(&ar1, &ar2)?;
/// assert_eq!(t.degrees_of_freedom, 1);
/// let arma11 = Blueprint::builder().nonseasonal(1, 0, 1).build()?.fit(&x)?;
/// assert!(nested_likelihood_ratio(&arma11, &ar2).is_err());
/// # Ok(()) }
/// ```
pub fn nested_likelihood_ratio(
    restricted: &FittedModel,
    general: &FittedModel,
) -> Result<NestedTest> {
    const WHAT: &str = "likelihood-ratio test";
    let lr = exact_ll(WHAT, restricted)?;
    let lg = exact_ll(WHAT, general)?;
    same_data(WHAT, restricted, general)?;
    let (r, g) = (restricted.blueprint(), general.blueprint());
    let pairs = [
        ("p", r.p, g.p),
        ("q", r.q, g.q),
        ("P", r.seasonal_p, g.seasonal_p),
        ("Q", r.seasonal_q, g.seasonal_q),
    ];
    for (name, a, b) in pairs {
        if a > b {
            return Err(refuse(
                WHAT,
                format!(
                    "{} is not nested in {}: order {name} = {a} exceeds {b}",
                    r.shape_label(),
                    g.shape_label()
                ),
            ));
        }
    }
    if r.seasonal_p + r.seasonal_q > 0 && g.period != r.period {
        return Err(refuse(WHAT, "seasonal periods differ"));
    }
    if (r.has_mean() && !g.has_mean()) || (r.has_drift() && !g.has_drift()) {
        return Err(refuse(
            WHAT,
            "the restricted model has a mean or drift the general model lacks",
        ));
    }
    for &(term, value) in g.held() {
        match r.held_value(term) {
            Some(v) if v == value => {}
            _ => {
                return Err(refuse(
                    WHAT,
                    format!(
                        "{term} is held in the general model but not at the same value in the restricted one"
                    ),
                ));
            }
        }
    }
    let kr = restricted.estimated_parameters();
    let kg = general.estimated_parameters();
    if kg <= kr {
        return Err(refuse(
            WHAT,
            "the general model has no extra estimated parameters",
        ));
    }
    let df = kg - kr;
    let statistic = (2.0 * (lg - lr)).max(0.0);
    let caveat = ((g.p > r.p && g.q > r.q) || (g.seasonal_p > r.seasonal_p && g.seasonal_q > r.seasonal_q)).then(|| {
        "AR and MA orders are raised together; under the restricted model the added pair is not \
         identified (common factor), so the chi-square reference is unreliable"
            .to_string()
    });
    Ok(NestedTest {
        statistic,
        degrees_of_freedom: df,
        p_value: chi_square_upper(statistic, df),
        caveat,
    })
}

//! Serde helper: a `Vec<f64>` whose NaN entries (missing readings, undefined values) are
//! stored as `null`, since JSON has no NaN. Use with `#[serde(with = "…")]`.

use serde::{Deserialize, Deserializer, Serialize, Serializer};

pub(crate) fn serialize<S: Serializer>(v: &[f64], s: S) -> Result<S::Ok, S::Error> {
    let opt: Vec<Option<f64>> = v
        .iter()
        .map(|x| if x.is_nan() { None } else { Some(*x) })
        .collect();
    opt.serialize(s)
}

pub(crate) fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<Vec<f64>, D::Error> {
    let opt: Vec<Option<f64>> = Vec::deserialize(d)?;
    Ok(opt.into_iter().map(|x| x.unwrap_or(f64::NAN)).collect())
}

/// The same for one `f64`: NaN (a missing reading) is stored as `null`.
pub(crate) mod one {
    use serde::{Deserialize, Deserializer, Serialize, Serializer};

    pub(crate) fn serialize<S: Serializer>(v: &f64, s: S) -> Result<S::Ok, S::Error> {
        (!v.is_nan()).then_some(*v).serialize(s)
    }

    pub(crate) fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        Ok(Option::<f64>::deserialize(d)?.unwrap_or(f64::NAN))
    }
}

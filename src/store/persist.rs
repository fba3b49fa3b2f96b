//! Versioned storage of blueprints, fitted models and monitors.

use serde::{Deserialize, Serialize};

use crate::base::error::{Error, ErrorKind, Result};
use crate::fit::fitted::FittedModel;
use crate::forecast::Monitor;
use crate::model::blueprint::Blueprint;

/// Version of the storage format written by this build.
pub const FORMAT_VERSION: u32 = 1;

const MODEL_SCHEMA: &str = "lagwise.fitted-model";
const MONITOR_SCHEMA: &str = "lagwise.monitor";
const BLUEPRINT_SCHEMA: &str = "lagwise.blueprint";

#[derive(Serialize)]
struct EnvelopeOut<'a, T> {
    schema: &'a str,
    version: u32,
    body: &'a T,
}

#[derive(Deserialize)]
struct Header {
    schema: String,
    version: u32,
}

#[derive(Deserialize)]
struct EnvelopeIn<T> {
    body: T,
}

fn corrupt(message: impl Into<String>) -> Error {
    Error::new(ErrorKind::CorruptStore {
        message: message.into(),
    })
}

fn save<T: Serialize>(schema: &str, body: &T) -> Result<String> {
    serde_json::to_string(&EnvelopeOut {
        schema,
        version: FORMAT_VERSION,
        body,
    })
    .map_err(|e| corrupt(format!("could not serialise: {e}")))
}

fn load<T: for<'de> Deserialize<'de>>(schema: &str, text: &str) -> Result<T> {
    let header: Header =
        serde_json::from_str(text).map_err(|e| corrupt(format!("not a lagwise document: {e}")))?;
    if header.schema != schema {
        return Err(corrupt(format!(
            "expected a {schema} document, found {}",
            header.schema
        )));
    }
    if header.version != FORMAT_VERSION {
        return Err(corrupt(format!(
            "unknown format version {}; this build reads version {FORMAT_VERSION}",
            header.version
        )));
    }
    let env: EnvelopeIn<T> = serde_json::from_str(text).map_err(|e| corrupt(format!("{e}")))?;
    Ok(env.body)
}

/// Serialise a fitted model to JSON (versioned envelope).
///
/// Every stored document is an envelope `{"schema": …, "version": …, "body": …}`. Loading
/// checks the schema name and version first, then the body's fields (serde reports a
/// missing or mistyped field by name), then the content itself (lengths, admissible
/// coefficients, a forecasting state consistent with the coefficients). Every refusal is
/// [`ErrorKind::CorruptStore`] with a message that says
/// which check failed. Workspaces are never stored.
///
/// ```
/// use lagwise::{Blueprint, Simulator};
/// # fn main() -> Result<(), lagwise::Error> {
/// let x = Simulator::builder().autoregressive(&[0.6]).level(70.0).build()?.generate(400, 3);
/// let fit = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
/// let text = lagwise::model_to_json(&fit)?;
/// let back = lagwise::model_from_json(&text)?;
/// assert_eq!(back.forecast(5, &[0.9])?, fit.forecast(5, &[0.9])?); // bit-identical
/// assert!(!back.has_residuals() && text.len() < 4_000); // the 400 residuals stay behind
/// assert!(lagwise::model_from_json(&text.replace("\"version\":1", "\"version\":9")).is_err());
/// # Ok(()) }
/// ```
///
/// The residual vectors (two per reading: a few tens of kilobytes for a day of
/// 15-minute readings) are left out: a restored model forecasts, monitors and reports,
/// but its residual check needs the residuals — store with
/// [`model_to_json_keeping_residuals`] when it must be re-run later.
pub fn model_to_json(model: &FittedModel) -> Result<String> {
    save(MODEL_SCHEMA, &model.without_residuals())
}

/// [`model_to_json`] keeping the residual vectors, so that the restored model's
/// [`FittedModel::residual_check`] and residual views work as on the original.
pub fn model_to_json_keeping_residuals(model: &FittedModel) -> Result<String> {
    save(MODEL_SCHEMA, model)
}

/// Restore a fitted model from JSON, validating it. A restored model forecasts
/// bit-identically to the original.
pub fn model_from_json(text: &str) -> Result<FittedModel> {
    load(MODEL_SCHEMA, text)
}

/// Serialise a monitor (model and filter state) to JSON.
pub fn monitor_to_json(monitor: &Monitor) -> Result<String> {
    save(MONITOR_SCHEMA, monitor)
}

/// Restore a monitor from JSON, validating it; it resumes where it was saved.
pub fn monitor_from_json(text: &str) -> Result<Monitor> {
    load(MONITOR_SCHEMA, text)
}

/// Serialise a blueprint to JSON.
pub fn blueprint_to_json(blueprint: &Blueprint) -> Result<String> {
    save(BLUEPRINT_SCHEMA, blueprint)
}

/// Restore a blueprint from JSON (the builder's validation runs again).
pub fn blueprint_from_json(text: &str) -> Result<Blueprint> {
    load(BLUEPRINT_SCHEMA, text)
}

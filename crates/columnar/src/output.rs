//! Fleet results out: one table per question (models, forecasts, new readings checked).

use std::sync::Arc;

use arrow_array::builder::{Float64Builder, ListBuilder, StringBuilder};
use arrow_array::{
    ArrayRef, BooleanArray, Float64Array, RecordBatch, StringArray, TimestampMillisecondArray,
    UInt32Array,
};
use arrow_schema::{DataType, Field, Schema, TimeUnit};
use lagwise::{Blueprint, FitSummary, Fleet, SearchSettings, TimeAxis};

use crate::Result;
use crate::input::TagSeries;

/// A fleet run over the tags of a long table, with its results as Arrow tables.
#[derive(Debug)]
pub struct FleetTables {
    tags: Vec<String>,
    axes: Vec<TimeAxis>,
    outcomes: Vec<std::result::Result<FitSummary, String>>,
}

fn utc_ms() -> DataType {
    DataType::Timestamp(TimeUnit::Millisecond, Some("UTC".into()))
}

fn level_name(prefix: &str, level: f64) -> String {
    let pct = 100.0 * level;
    if (pct - pct.round()).abs() < 1e-9 {
        format!("{prefix}_{:.0}", pct)
    } else {
        format!("{prefix}_{}", format!("{pct:.3}").trim_end_matches('0'))
    }
}

impl FleetTables {
    fn from_report(series: &[TagSeries], report: lagwise::FleetReport<usize>) -> FleetTables {
        let outcomes = report
            .into_outcomes()
            .into_iter()
            .map(|o| o.result.map_err(|e| e.to_string()))
            .collect();
        FleetTables {
            tags: series.iter().map(|s| s.tag.clone()).collect(),
            axes: series.iter().map(|s| s.series.axis).collect(),
            outcomes,
        }
    }

    /// Fit `blueprint` to every tag on `fleet` (in parallel; a tag that fails keeps its
    /// error text).
    pub fn fit(series: &[TagSeries], blueprint: &Blueprint, fleet: &Fleet) -> FleetTables {
        let items: Vec<(usize, &[f64])> = series
            .iter()
            .enumerate()
            .map(|(i, s)| (i, s.series.values.as_slice()))
            .collect();
        let report = fleet.fit_ragged(blueprint, &items);
        Self::from_report(series, report)
    }

    /// Search the orders of every tag on `fleet`.
    pub fn search(series: &[TagSeries], settings: &SearchSettings, fleet: &Fleet) -> FleetTables {
        let items: Vec<(usize, &[f64])> = series
            .iter()
            .enumerate()
            .map(|(i, s)| (i, s.series.values.as_slice()))
            .collect();
        let report = fleet.search_ragged(settings, &items);
        Self::from_report(series, report)
    }

    /// The summary of one tag (`None` for an unknown tag; `Err` with the error text for a
    /// tag whose fit failed).
    pub fn summary(&self, tag: &str) -> Option<std::result::Result<&FitSummary, &str>> {
        let i = self.tags.iter().position(|t| t == tag)?;
        Some(self.outcomes[i].as_ref().map_err(String::as_str))
    }

    /// One row per tag: `tag`, `model` (label), `terms`, `estimates`, `std_errors`
    /// (parallel lists), `sigma2`, `log_likelihood`, `aic`, `aicc`, `bic`, `white`,
    /// `ljung_box_p` (at the last lag checked), `warnings`, `events`, `error` (the error
    /// text of a tag that failed; its other columns null).
    pub fn models(&self) -> Result<RecordBatch> {
        let n = self.tags.len();
        let mut model = Vec::with_capacity(n);
        let mut terms = ListBuilder::new(StringBuilder::new());
        let mut estimates = ListBuilder::new(Float64Builder::new());
        let mut std_errors = ListBuilder::new(Float64Builder::new());
        let mut warnings = ListBuilder::new(StringBuilder::new());
        let mut events = ListBuilder::new(StringBuilder::new());
        let (mut sigma2, mut loglik, mut aic, mut aicc, mut bic, mut lbp) =
            (vec![], vec![], vec![], vec![], vec![], vec![]);
        let mut white = Vec::with_capacity(n);
        let mut error = Vec::with_capacity(n);
        for o in &self.outcomes {
            match o {
                Ok(s) => {
                    model.push(Some(s.shape.to_string()));
                    for c in &s.coefficients {
                        terms.values().append_value(c.term.to_string());
                        estimates.values().append_value(c.value);
                        std_errors.values().append_option(c.std_error);
                    }
                    terms.append(true);
                    estimates.append(true);
                    std_errors.append(true);
                    for w in &s.warnings {
                        warnings.values().append_value(w.to_string());
                    }
                    warnings.append(true);
                    for e in &s.events {
                        events.values().append_value(format!(
                            "{} of {:+} at reading {} (t = {:.1})",
                            e.kind, e.size, e.index, e.statistic
                        ));
                    }
                    events.append(true);
                    sigma2.push(Some(s.innovation_variance));
                    loglik.push(Some(s.log_likelihood.value()));
                    aic.push(s.criteria.as_ref().map(|c| c.akaike));
                    aicc.push(s.criteria.as_ref().and_then(|c| c.akaike_corrected));
                    bic.push(s.criteria.as_ref().map(|c| c.schwarz));
                    white.push(Some(s.whiteness.white));
                    lbp.push(s.whiteness.p_value_at_last_lag);
                    error.push(None);
                }
                Err(e) => {
                    model.push(None);
                    terms.append(false);
                    estimates.append(false);
                    std_errors.append(false);
                    warnings.append(false);
                    events.append(false);
                    for v in [
                        &mut sigma2,
                        &mut loglik,
                        &mut aic,
                        &mut aicc,
                        &mut bic,
                        &mut lbp,
                    ] {
                        v.push(None);
                    }
                    white.push(None);
                    error.push(Some(e.clone()));
                }
            }
        }
        let list = |t: DataType| DataType::List(Arc::new(Field::new("item", t, true)));
        let schema = Arc::new(Schema::new(vec![
            Field::new("tag", DataType::Utf8, false),
            Field::new("model", DataType::Utf8, true),
            Field::new("terms", list(DataType::Utf8), true),
            Field::new("estimates", list(DataType::Float64), true),
            Field::new("std_errors", list(DataType::Float64), true),
            Field::new("sigma2", DataType::Float64, true),
            Field::new("log_likelihood", DataType::Float64, true),
            Field::new("aic", DataType::Float64, true),
            Field::new("aicc", DataType::Float64, true),
            Field::new("bic", DataType::Float64, true),
            Field::new("white", DataType::Boolean, true),
            Field::new("ljung_box_p", DataType::Float64, true),
            Field::new("warnings", list(DataType::Utf8), true),
            Field::new("events", list(DataType::Utf8), true),
            Field::new("error", DataType::Utf8, true),
        ]));
        let columns: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(self.tags.clone())),
            Arc::new(StringArray::from(model)),
            Arc::new(terms.finish()),
            Arc::new(estimates.finish()),
            Arc::new(std_errors.finish()),
            Arc::new(Float64Array::from(sigma2)),
            Arc::new(Float64Array::from(loglik)),
            Arc::new(Float64Array::from(aic)),
            Arc::new(Float64Array::from(aicc)),
            Arc::new(Float64Array::from(bic)),
            Arc::new(BooleanArray::from(white)),
            Arc::new(Float64Array::from(lbp)),
            Arc::new(warnings.finish()),
            Arc::new(events.finish()),
            Arc::new(StringArray::from(error)),
        ];
        Ok(RecordBatch::try_new(schema, columns)?)
    }

    /// Forecasts `horizon` slots past each tag's last slot at the interval `levels`: one
    /// row per tag and step — `tag`, `step`, `time` (UTC), `mean`, `sd`, then `lower_<L>`
    /// and `upper_<L>` for each level in percent (`lower_80`, `upper_99.9`). Tags whose fit
    /// failed, or whose summaries keep no monitor, have no rows.
    pub fn forecasts(&self, horizon: usize, levels: &[f64]) -> Result<RecordBatch> {
        let mut tag = Vec::new();
        let mut step = Vec::new();
        let mut time = Vec::new();
        let mut mean = Vec::new();
        let mut sd = Vec::new();
        let mut bounds: Vec<(Vec<f64>, Vec<f64>)> = vec![(Vec::new(), Vec::new()); levels.len()];
        for (i, o) in self.outcomes.iter().enumerate() {
            let Some(monitor) = o.as_ref().ok().and_then(|s| s.monitor()) else {
                continue;
            };
            let fc =
                monitor
                    .forecast(horizon, levels)
                    .map_err(|source| crate::TableError::Series {
                        tag: self.tags[i].clone(),
                        source,
                    })?;
            for s in &fc.steps {
                tag.push(self.tags[i].clone());
                step.push(s.step as u32);
                time.push(self.axes[i].time_of(s.index));
                mean.push(s.mean);
                sd.push(s.sd);
                for (b, iv) in bounds.iter_mut().zip(&s.intervals) {
                    b.0.push(iv.lower);
                    b.1.push(iv.upper);
                }
            }
        }
        let mut fields = vec![
            Field::new("tag", DataType::Utf8, false),
            Field::new("step", DataType::UInt32, false),
            Field::new("time", utc_ms(), true),
            Field::new("mean", DataType::Float64, false),
            Field::new("sd", DataType::Float64, false),
        ];
        let mut columns: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(tag)),
            Arc::new(UInt32Array::from(step)),
            Arc::new(TimestampMillisecondArray::from(time).with_timezone("UTC")),
            Arc::new(Float64Array::from(mean)),
            Arc::new(Float64Array::from(sd)),
        ];
        for (level, (lo, hi)) in levels.iter().zip(bounds) {
            fields.push(Field::new(
                level_name("lower", *level),
                DataType::Float64,
                false,
            ));
            fields.push(Field::new(
                level_name("upper", *level),
                DataType::Float64,
                false,
            ));
            columns.push(Arc::new(Float64Array::from(lo)));
            columns.push(Arc::new(Float64Array::from(hi)));
        }
        Ok(RecordBatch::try_new(
            Arc::new(Schema::new(fields)),
            columns,
        )?)
    }

    /// Check new readings against each tag's one-step intervals (the monitors move on):
    /// `new` holds the tags' readings after their histories, on grids of the same cadence
    /// (a slot before the history's end is skipped; a gap after it is missing readings).
    /// One row per slot checked: `tag`, `time`, `reading` (null when missing),
    /// `predicted`, `lower`, `upper`, `z`, `alarm`. Tags without a model are skipped.
    pub fn watch(&mut self, new: &[TagSeries]) -> Result<RecordBatch> {
        let mut tag = Vec::new();
        let mut time = Vec::new();
        let mut reading = Vec::new();
        let (mut predicted, mut lower, mut upper, mut z) = (vec![], vec![], vec![], vec![]);
        let mut alarm = Vec::new();
        for fresh in new {
            let Some(i) = self.tags.iter().position(|t| *t == fresh.tag) else {
                continue;
            };
            let axis = self.axes[i];
            let Some(monitor) = self.outcomes[i]
                .as_mut()
                .ok()
                .and_then(|s| s.take_monitor())
            else {
                continue;
            };
            let mut monitor = monitor;
            if fresh.series.axis.cadence_ms() != axis.cadence_ms() {
                return Err(crate::TableError::Mismatch {
                    tag: fresh.tag.clone(),
                    reason: format!(
                        "new readings every {} ms, the history every {} ms",
                        fresh.series.axis.cadence_ms(),
                        axis.cadence_ms()
                    ),
                });
            }
            let offset =
                (fresh.series.axis.origin_ms() - axis.origin_ms()).div_euclid(axis.cadence_ms());
            for (k, &v) in fresh.series.values.iter().enumerate() {
                let slot = offset + k as i64;
                if slot < monitor.next_index() as i64 {
                    continue;
                }
                while (monitor.next_index() as i64) < slot {
                    let _ = monitor.observe(f64::NAN);
                }
                let c = monitor
                    .observe(v)
                    .map_err(|source| crate::TableError::Series {
                        tag: fresh.tag.clone(),
                        source,
                    })?;
                tag.push(fresh.tag.clone());
                time.push(axis.time_of(c.index));
                reading.push(c.reading.is_finite().then_some(c.reading));
                predicted.push(c.predicted);
                lower.push(c.lower);
                upper.push(c.upper);
                z.push(c.standardized);
                alarm.push(c.outside);
            }
            // Keep the monitor, moved on, for the next batch of readings.
            if let Ok(s) = self.outcomes[i].as_mut() {
                s.put_monitor(monitor);
            }
        }
        let schema = Arc::new(Schema::new(vec![
            Field::new("tag", DataType::Utf8, false),
            Field::new("time", utc_ms(), true),
            Field::new("reading", DataType::Float64, true),
            Field::new("predicted", DataType::Float64, false),
            Field::new("lower", DataType::Float64, false),
            Field::new("upper", DataType::Float64, false),
            Field::new("z", DataType::Float64, true),
            Field::new("alarm", DataType::Boolean, false),
        ]));
        let columns: Vec<ArrayRef> = vec![
            Arc::new(StringArray::from(tag)),
            Arc::new(TimestampMillisecondArray::from(time).with_timezone("UTC")),
            Arc::new(Float64Array::from(reading)),
            Arc::new(Float64Array::from(predicted)),
            Arc::new(Float64Array::from(lower)),
            Arc::new(Float64Array::from(upper)),
            Arc::new(Float64Array::from(z)),
            Arc::new(BooleanArray::from(alarm)),
        ];
        Ok(RecordBatch::try_new(schema, columns)?)
    }
}

#[cfg(test)]
mod tests {
    #[test]
    fn level_names() {
        assert_eq!(super::level_name("lower", 0.8), "lower_80");
        assert_eq!(super::level_name("upper", 0.999), "upper_99.9");
    }
}

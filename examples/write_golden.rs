//! Writes the golden storage fixture used by tests/persistence.rs. Run once per format
//! version: `cargo run --example write_golden` (writes into tests/data/).

use lagwise::{Blueprint, Simulator};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let x = Simulator::builder()
        .autoregressive(&[0.7])
        .seasonal(&[], &[-0.4], 4)
        .differencing(0, 1)
        .level(50.0)
        .build()?
        .generate(120, 2024);
    let fit = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .seasonal(0, 1, 1, 4)
        .build()?
        .fit(&x)?;
    std::fs::write(
        "tests/data/golden_model_v1.json",
        lagwise::model_to_json(&fit)?,
    )?;
    let fc = fit.forecast(8, &[0.95])?;
    let text: Vec<String> = fc
        .steps
        .iter()
        .map(|s| format!("{:?} {:?}", s.mean, s.sd))
        .collect();
    std::fs::write(
        "tests/data/golden_model_v1.forecast",
        text.join("\n") + "\n",
    )?;
    Ok(())
}

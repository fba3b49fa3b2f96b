//! scratch
use lagwise::{Blueprint, SearchSettings, Simulator, search_orders};
fn main() -> Result<(), lagwise::Error> {
    let x = Simulator::builder()
        .autoregressive(&[0.8])
        .level(52.0)
        .innovation_sd(0.25)
        .wave(96, 1, 4.0, -1.5)
        .wave(96, 2, 1.2, 0.0)
        .wave(672, 1, 0.8, 0.3)
        .build()?
        .generate(3 * 672, 417);
    let settings = SearchSettings::builder()
        .cycle(96, 6)
        .cycle(672, 4)
        .build()?;
    let t = std::time::Instant::now();
    let outcome = search_orders(&x, &settings)?;
    println!("{:?}", t.elapsed());
    println!("{}", outcome.model.blueprint().shape_label());
    println!("{}", outcome);
    let day_ahead = outcome.model.forecast(96, &[0.9])?;
    println!("in 8 hours: {:.1} °C", day_ahead.steps[31].mean);
    let bp = Blueprint::builder()
        .nonseasonal(1, 0, 0)
        .seasonal(0, 1, 1, 96)
        .cycle(672, 2)
        .build()?;
    println!("{}", bp.fit(&x)?.blueprint().shape_label());
    Ok(())
}

//! The README's "make the same page for your own fleet" example (a test keeps the two
//! the same). Writes `morning.html` in the current folder.

use lagwise::{Blueprint, Simulator};
use lagwise_figures::{Caption, FleetPage, TagSheet, fan_card, residual_card};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let x = Simulator::builder()
        .autoregressive(&[0.7])
        .level(52.0)
        .build()?
        .generate(672, 7);
    let model = Blueprint::builder().nonseasonal(1, 0, 0).build()?.fit(&x)?;
    let check = model.residual_check(model.default_check_lags(), 0.05)?;
    let caption = Caption::new("KB-SS0007-TR")
        .unit("°C")
        .reading("return temperature");
    let mut page = FleetPage::new("Morning check");
    page.add(
        TagSheet::new("KB-SS0007-TR")
            .model(model.blueprint().shape_label())
            .residuals(check.white, None)
            .card(residual_card(&caption, &model, &check)?)
            .card(fan_card(
                &caption,
                &x,
                &model.forecast(96, &[0.8, 0.95])?,
                192,
            )?),
    );
    std::fs::write("morning.html", page.render()?.html())?;
    Ok(())
}

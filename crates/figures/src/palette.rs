//! The cards' colours, by role. Chosen for this crate: a dark navy for readings and
//! residuals, a sea-green family for forecast bands, light sky for significance bands and
//! dark amber for anything that needs a look (alarms, the test level, points outside their
//! interval). The roles that share a panel differ in lightness as well as hue, so a card
//! stays readable printed in grey and to readers with red–green colour blindness (the hues
//! come from the Okabe–Ito set of colour-blind-safe colours); shapes and dashes carry the
//! same distinctions a second time.

use plotters::style::RGBColor;

/// Paper (card background).
pub(crate) const PAPER: RGBColor = RGBColor(0xff, 0xff, 0xff);
/// Text, axes and frames.
pub(crate) const INK: RGBColor = RGBColor(0x1c, 0x22, 0x2b);
/// Faint guide lines.
pub(crate) const GUIDE: RGBColor = RGBColor(0xe4, 0xe8, 0xec);
/// Readings, residuals, autocorrelation bars: the data.
pub(crate) const TRACE: RGBColor = RGBColor(0x1f, 0x3a, 0x5f);
/// The second data role in a panel (partial autocorrelations, the forecast mean).
pub(crate) const SECOND: RGBColor = RGBColor(0x00, 0x72, 0xb2);
/// Significance bands (filled).
pub(crate) const BAND: RGBColor = RGBColor(0xcd, 0xe7, 0xf4);
/// Edges of a band drawn as a line (Bartlett's band, interval limits).
pub(crate) const BAND_EDGE: RGBColor = RGBColor(0x56, 0x8f, 0xb0);
/// Anything that needs a look: alarms, the test level, points outside their interval.
pub(crate) const ALERT: RGBColor = RGBColor(0xc9, 0x7a, 0x00);
/// Quiet marks: lags without degrees of freedom, seasonal-lag stripes, failed rows.
pub(crate) const QUIET: RGBColor = RGBColor(0x7d, 0x87, 0x91);
/// Seasonal-lag stripes behind correlogram bars.
pub(crate) const SEASON: RGBColor = RGBColor(0xf3, 0xee, 0xdc);
/// The wide (e.g. 95%) forecast band.
pub(crate) const FAN_WIDE: RGBColor = RGBColor(0xd3, 0xee, 0xe7);
/// The narrow (e.g. 80%) forecast band.
pub(crate) const FAN_NARROW: RGBColor = RGBColor(0x6d, 0xbc, 0xa6);
/// The forecast mean.
pub(crate) const FAN_MEAN: RGBColor = RGBColor(0x00, 0x5e, 0x4c);

/// `#rrggbb` of a colour (for the page's CSS and the tests).
pub(crate) fn hex(c: RGBColor) -> String {
    format!("#{:02x}{:02x}{:02x}", c.0, c.1, c.2)
}

/// Relative luminance (WCAG 2 definition: sRGB linearised, weights 0.2126/0.7152/0.0722).
#[cfg(test)]
pub(crate) fn luminance(c: RGBColor) -> f64 {
    let lin = |v: u8| {
        let s = f64::from(v) / 255.0;
        if s <= 0.04045 {
            s / 12.92
        } else {
            ((s + 0.055) / 1.055).powf(2.4)
        }
    };
    0.2126 * lin(c.0) + 0.7152 * lin(c.1) + 0.0722 * lin(c.2)
}

/// WCAG contrast ratio of two colours (1 to 21).
#[cfg(test)]
pub(crate) fn contrast(a: RGBColor, b: RGBColor) -> f64 {
    let (la, lb) = (luminance(a), luminance(b));
    (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Pairs that meet in one panel: in grey they must still differ (contrast ratio ≥ 1.5;
    /// WCAG asks 3 for graphical objects against their background, checked below).
    #[test]
    fn roles_that_share_a_panel_differ_in_grey() {
        let pairs = [
            (TRACE, BAND),
            (TRACE, ALERT),
            (TRACE, SECOND),
            (ALERT, BAND),
            (FAN_MEAN, FAN_NARROW),
            (FAN_NARROW, FAN_WIDE),
            (TRACE, FAN_WIDE),
            (TRACE, SEASON),
            (BAND_EDGE, BAND),
            (QUIET, PAPER),
        ];
        for (a, b) in pairs {
            let c = contrast(a, b);
            assert!(c >= 1.5, "{} vs {}: contrast {c:.2}", hex(a), hex(b));
        }
    }

    /// Marks drawn on the paper need WCAG 2.1's 3:1 for graphical objects (SC 1.4.11);
    /// text (ink) needs 4.5:1 (SC 1.4.3).
    #[test]
    fn marks_stand_out_from_the_paper() {
        for c in [TRACE, SECOND, FAN_MEAN, INK] {
            assert!(contrast(c, PAPER) >= 4.5, "{}", hex(c));
        }
        for c in [ALERT, BAND_EDGE, QUIET] {
            assert!(contrast(c, PAPER) >= 3.0, "{}", hex(c));
        }
        // The luminance formula itself, at its ends and one published value (WCAG: black
        // on white is 21:1).
        assert!((contrast(INK, INK) - 1.0).abs() < 1e-12);
        assert!((contrast(RGBColor(0, 0, 0), PAPER) - 21.0).abs() < 1e-9);
    }

    #[test]
    fn hex_spells_the_colour() {
        assert_eq!(hex(ALERT), "#c97a00");
        assert_eq!(hex(PAPER), "#ffffff");
    }
}

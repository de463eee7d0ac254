//! Contour levels, colour maps and tick values.
//!
//! Defaults (our own choice): magnitudes are shaded with a perceptually
//! uniform sequential map (viridis); signed quantities (advection, vorticity,
//! anomalies) with a diverging map centred on zero, warm colours (red) for
//! positive values. Levels are "nice" numbers (1, 2, 2.5 or 5 times a power
//! of ten) unless the caller gives an interval or an explicit list.

use plotters::style::{RGBAColor, RGBColor};

/// Colour maps for filled contours.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Palette {
    /// Sequential, perceptually uniform, dark blue to yellow.
    Viridis,
    /// Sequential, perceptually uniform and readable with colour-vision deficiency.
    Cividis,
    /// Sequential, black through red to pale yellow.
    Magma,
    /// Diverging: blue for negative, white at zero, red for positive.
    BlueWhiteRed,
    /// Diverging: purple for negative, orange for positive.
    PurpleOrange,
}

impl Palette {
    pub fn is_diverging(self) -> bool {
        matches!(self, Palette::BlueWhiteRed | Palette::PurpleOrange)
    }

    /// The colour at position `t` in 0..=1 (low to high values).
    pub fn at(self, t: f64) -> RGBColor {
        let t = if t.is_finite() {
            t.clamp(0.0, 1.0)
        } else {
            0.5
        };
        let c = match self {
            Palette::Viridis => colorous::VIRIDIS.eval_continuous(t),
            Palette::Cividis => colorous::CIVIDIS.eval_continuous(t),
            Palette::Magma => colorous::MAGMA.eval_continuous(t),
            // The library's red-blue map runs red to blue; reverse it so that
            // positive (warm) values are red.
            Palette::BlueWhiteRed => colorous::RED_BLUE.eval_continuous(1.0 - t),
            // Purple-orange runs orange to purple; reverse for orange = positive.
            Palette::PurpleOrange => colorous::PURPLE_ORANGE.eval_continuous(1.0 - t),
        };
        RGBColor(c.r, c.g, c.b)
    }

    pub fn name(self) -> &'static str {
        match self {
            Palette::Viridis => "viridis",
            Palette::Cividis => "cividis",
            Palette::Magma => "magma",
            Palette::BlueWhiteRed => "blue-white-red",
            Palette::PurpleOrange => "purple-orange",
        }
    }
}

/// How contour levels are chosen.
#[derive(Debug, Clone, PartialEq, Default)]
pub enum Levels {
    /// About a dozen nice levels spanning the data.
    #[default]
    Auto,
    /// Every multiple of this interval within the data range (e.g. 60 m for
    /// thickness lines, 4 hPa for isobars).
    Interval(f64),
    /// Exactly these levels, sorted ascending by the renderer.
    Explicit(Vec<f64>),
}

/// A nice step (1, 2, 2.5 or 5 times a power of ten) giving about `target`
/// intervals over `span`.
pub fn nice_step(span: f64, target: usize) -> f64 {
    let target = target.max(1) as f64;
    if !(span.is_finite() && span > 0.0) {
        return 1.0;
    }
    let raw = span / target;
    let power = 10f64.powf(raw.log10().floor());
    let fraction = raw / power;
    let nice = if fraction <= 1.0 {
        1.0
    } else if fraction <= 2.0 {
        2.0
    } else if fraction <= 2.5 {
        2.5
    } else if fraction <= 5.0 {
        5.0
    } else {
        10.0
    };
    nice * power
}

/// Multiples of `step` in [lo, hi], with small tolerance so end points count.
pub fn multiples_within(lo: f64, hi: f64, step: f64) -> Vec<f64> {
    if !(lo.is_finite() && hi.is_finite() && step.is_finite() && step > 0.0) || hi < lo {
        return Vec::new();
    }
    let eps = step * 1e-9;
    let first = ((lo - eps) / step).ceil() as i64;
    let last = ((hi + eps) / step).floor() as i64;
    if last - first > 100_000 {
        return Vec::new();
    }
    (first..=last).map(|k| clean(k as f64 * step)).collect()
}

/// Remove floating-point dust such as 0.30000000000000004 or -0.0.
fn clean(v: f64) -> f64 {
    let r = (v * 1e9).round() / 1e9;
    if r == 0.0 {
        0.0
    } else {
        r
    }
}

/// Levels for shading: boundaries of bands covering [min, max].
pub(crate) fn shading_levels(levels: &Levels, min: f64, max: f64, diverging: bool) -> Vec<f64> {
    let mut out = match levels {
        Levels::Explicit(list) => {
            let mut v: Vec<f64> = list.iter().copied().filter(|x| x.is_finite()).collect();
            v.sort_by(|a, b| a.total_cmp(b));
            v.dedup();
            v
        }
        Levels::Interval(step) if step.is_finite() && *step > 0.0 => {
            let (lo, hi) = if diverging {
                let m = min.abs().max(max.abs());
                (-m, m)
            } else {
                (min, max)
            };
            let lo = (lo / step).floor() * step;
            let hi = (hi / step).ceil() * step;
            let v = multiples_within(lo, hi, *step);
            if v.len() > 60 {
                auto_levels(min, max, diverging)
            } else {
                v
            }
        }
        _ => auto_levels(min, max, diverging),
    };
    if out.len() < 2 {
        // A constant field: one band around the value.
        let centre = if min.is_finite() { min } else { 0.0 };
        let half = if centre == 0.0 {
            1.0
        } else {
            centre.abs() * 0.05
        };
        out = vec![centre - half, centre + half];
    }
    out
}

fn auto_levels(min: f64, max: f64, diverging: bool) -> Vec<f64> {
    if !(min.is_finite() && max.is_finite()) {
        return Vec::new();
    }
    if diverging {
        let m = min.abs().max(max.abs());
        if m == 0.0 {
            return vec![-1.0, 1.0];
        }
        let step = nice_step(2.0 * m, 12);
        let top = (m / step).ceil() * step;
        return multiples_within(-top, top, step);
    }
    if max <= min {
        return Vec::new();
    }
    let step = nice_step(max - min, 12);
    let lo = (min / step).floor() * step;
    let hi = (max / step).ceil() * step;
    multiples_within(lo, hi, step)
}

/// Levels for contour lines: multiples of the interval inside the data range.
pub(crate) fn line_levels(levels: &Levels, min: f64, max: f64) -> Vec<f64> {
    if !(min.is_finite() && max.is_finite()) {
        return Vec::new();
    }
    match levels {
        Levels::Explicit(list) => {
            let mut v: Vec<f64> = list.iter().copied().filter(|x| x.is_finite()).collect();
            v.sort_by(|a, b| a.total_cmp(b));
            v.dedup();
            v
        }
        Levels::Interval(step) if step.is_finite() && *step > 0.0 => {
            let v = multiples_within(min, max, *step);
            if v.len() > 200 {
                multiples_within(min, max, nice_step(max - min, 10))
            } else {
                v
            }
        }
        _ => multiples_within(min, max, nice_step(max - min, 10)),
    }
}

/// Format a value with as many decimals as the step needs.
pub fn format_value(value: f64, step: f64) -> String {
    if !value.is_finite() {
        return "missing".to_string();
    }
    let decimals = if step.is_finite() && step > 0.0 {
        let mut d = 0usize;
        while d < 6
            && ((step * 10f64.powi(d as i32)).round() - step * 10f64.powi(d as i32)).abs() > 1e-6
        {
            d += 1;
        }
        d
    } else {
        2
    };
    let text = format!("{:.*}", decimals, value);
    // Avoid "-0".
    if text
        .trim_start_matches('-')
        .chars()
        .all(|c| c == '0' || c == '.')
    {
        text.trim_start_matches('-').to_string()
    } else {
        text.replace('-', "\u{2212}")
    }
}

/// Smallest positive difference between neighbouring levels (for formatting).
pub(crate) fn level_step(levels: &[f64]) -> f64 {
    levels
        .windows(2)
        .map(|w| (w[1] - w[0]).abs())
        .filter(|d| *d > 0.0)
        .fold(f64::INFINITY, f64::min)
}

/// Colours of the bands between consecutive levels. For a diverging palette
/// the colour depends on the band's value relative to the largest absolute
/// level, so zero stays white even when the levels are not symmetric.
pub(crate) fn band_colours(levels: &[f64], palette: Palette) -> Vec<RGBAColor> {
    let n = levels.len().saturating_sub(1);
    if n == 0 {
        return Vec::new();
    }
    if palette.is_diverging() {
        let m = levels.iter().fold(0.0f64, |a, b| a.max(b.abs()));
        let m = if m > 0.0 { m } else { 1.0 };
        return levels
            .windows(2)
            .map(|w| {
                let mid = 0.5 * (w[0] + w[1]);
                // Keep the ends slightly in from the darkest colours so that
                // black text stays readable on them.
                let t = 0.5 + 0.47 * mid / m;
                RGBAColor::from(palette.at(t))
            })
            .collect();
    }
    (0..n)
        .map(|i| {
            let t = if n == 1 {
                0.5
            } else {
                i as f64 / (n - 1) as f64
            };
            RGBAColor::from(palette.at(0.02 + 0.96 * t))
        })
        .collect()
}

pub(crate) trait ToRgba {
    fn rgba(self) -> RGBAColor;
}

impl ToRgba for RGBColor {
    fn rgba(self) -> RGBAColor {
        RGBAColor(self.0, self.1, self.2, 1.0)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nice_steps_are_one_two_two_and_a_half_or_five_times_a_power_of_ten() {
        // Common practice for axis ticks, no single source.
        assert_eq!(nice_step(100.0, 10), 10.0);
        assert_eq!(nice_step(7.0, 10), 1.0);
        assert_eq!(nice_step(0.23, 10), 0.025);
        assert_eq!(nice_step(480.0, 12), 50.0);
    }

    #[test]
    fn interval_levels_are_multiples_of_the_interval() {
        // Thickness lines every 60 m over 5100..5700 m.
        let v = line_levels(&Levels::Interval(60.0), 5105.0, 5690.0);
        assert_eq!(v.first(), Some(&5160.0));
        assert_eq!(v.last(), Some(&5640.0));
        assert!(v.iter().all(|x| (x / 60.0).fract().abs() < 1e-9));
    }

    #[test]
    fn diverging_levels_are_symmetric_about_zero_and_include_it() {
        let v = shading_levels(&Levels::Auto, -3.0, 7.0, true);
        assert!(v.contains(&0.0));
        assert_eq!(v.first().map(|x| -x), v.last().copied());
        assert!(*v.last().unwrap() >= 7.0);
    }

    #[test]
    fn diverging_palette_puts_red_on_positive_values() {
        let levels = [-2.0, -1.0, 0.0, 1.0, 2.0];
        let c = band_colours(&levels, Palette::BlueWhiteRed);
        let warm = c[3];
        let cool = c[0];
        assert!(warm.0 > warm.2, "positive band should be red: {warm:?}");
        assert!(cool.2 > cool.0, "negative band should be blue: {cool:?}");
    }

    #[test]
    fn values_format_with_the_decimals_of_the_step_and_a_true_minus_sign() {
        assert_eq!(format_value(5460.0, 60.0), "5460");
        assert_eq!(format_value(-0.5, 0.25), "\u{2212}0.50");
        assert_eq!(format_value(-0.0, 1.0), "0");
        assert_eq!(format_value(f64::NAN, 1.0), "missing");
    }
}

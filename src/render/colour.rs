//! Contour levels, colour tables and tick values.
//!
//! The colour tables are Baroc's own, defined here by a few anchor colours
//! in CIE L*a*b* (lightness L*, chroma C*, hue angle h) and interpolated in
//! that space, so that equal steps of data are equal steps of perceived
//! lightness:
//! - [`Palette::Sequential`] ("slate to straw") for magnitudes: lightness
//!   rises steadily from a slate blue through teal and green to a pale
//!   straw, so the table reads in grey print and with any colour-vision
//!   deficiency (lightness alone orders it);
//! - [`Palette::Diverging`] ("blue to copper") for signed fields: lightness
//!   falls steadily away from a white centre, blue for negative and copper
//!   for positive (a blue/orange pair stays distinct under red-green
//!   colour-vision deficiency); a neutral white band hides sign noise close
//!   to zero;
//! - [`Palette::Cyclic`] ("compass") for angles over -180..180 degrees:
//!   white at zero, copper at +90, blue at -90, the same dark violet at both
//!   ends, so there is no jump where the angle wraps.
//! Levels are "nice" numbers (1, 2, 2.5 or 5 times a power of ten) unless
//! the caller gives an interval or an explicit list.

use plotters::style::{RGBAColor, RGBColor};

/// Colour tables for filled contours.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Palette {
    /// Sequential, dark slate blue to pale straw, lightness increasing.
    Sequential,
    /// Diverging: blue for negative, white at zero, copper for positive.
    Diverging,
    /// Cyclic for angles: white at 0, copper at +90, blue at -90, dark violet at ±180.
    Cyclic,
}

/// Anchor colours (L*, C*, hue in degrees) of each table, low to high.
/// Chosen for this project: lightness strictly monotone along each
/// sequential run, chroma kept inside the sRGB gamut at every lightness.
/// The sequential table starts at L* 36, not near black, so that black
/// barbs, arrows and labels stay readable on every band.
const SEQUENTIAL: [(f64, f64, f64); 5] = [
    (36.0, 34.0, 285.0),
    (51.0, 34.0, 240.0),
    (66.0, 38.0, 190.0),
    (81.0, 52.0, 130.0),
    (96.0, 42.0, 95.0),
];
/// From the most negative end to the centre; the positive half mirrors it
/// in lightness with copper hues.
const DIVERGING_NEGATIVE: [(f64, f64, f64); 3] = [(34.0, 48.0, 275.0), (66.0, 34.0, 250.0), (97.0, 0.0, 250.0)];
const DIVERGING_POSITIVE: [(f64, f64, f64); 3] = [(97.0, 0.0, 60.0), (66.0, 45.0, 55.0), (34.0, 52.0, 40.0)];
/// Half a turn from 0 to +180 degrees; -180..0 runs the same lightness with
/// blue hues, and both ends meet in one dark violet.
const CYCLIC_POSITIVE: [(f64, f64, f64); 3] = [(97.0, 0.0, 60.0), (66.0, 50.0, 55.0), (30.0, 30.0, 315.0)];
const CYCLIC_NEGATIVE: [(f64, f64, f64); 3] = [(97.0, 0.0, 250.0), (66.0, 38.0, 250.0), (30.0, 30.0, 315.0)];

/// Interpolate anchors at `t` in 0..=1 in L*C*h (hue the short way round).
fn along(anchors: &[(f64, f64, f64)], t: f64) -> (f64, f64, f64) {
    let n = anchors.len() - 1;
    let x = t.clamp(0.0, 1.0) * n as f64;
    let i = (x.floor() as usize).min(n - 1);
    let f = x - i as f64;
    let (a, b) = (anchors[i], anchors[i + 1]);
    let mut dh = b.2 - a.2;
    if dh > 180.0 {
        dh -= 360.0;
    } else if dh < -180.0 {
        dh += 360.0;
    }
    // A grey anchor (C* = 0) has no hue: take the other end's.
    let h = if a.1 == 0.0 {
        b.2
    } else if b.1 == 0.0 {
        a.2
    } else {
        a.2 + f * dh
    };
    (a.0 + f * (b.0 - a.0), a.1 + f * (b.1 - a.1), h)
}

/// CIE L*a*b* (D65 white) to linear sRGB. Formulas: CIE 15:2004 (inverse
/// of the L*a*b* definition) and IEC 61966-2-1 (XYZ to linear sRGB matrix).
fn lab_to_linear_srgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let finv = |t: f64| {
        let d = 6.0 / 29.0;
        if t > d {
            t * t * t
        } else {
            3.0 * d * d * (t - 4.0 / 29.0)
        }
    };
    let fy = (l + 16.0) / 116.0;
    let (fx, fz) = (fy + a / 500.0, fy - b / 200.0);
    let (x, y, z) = (0.95047 * finv(fx), finv(fy), 1.08883 * finv(fz));
    [
        3.2406 * x - 1.5372 * y - 0.4986 * z,
        -0.9689 * x + 1.8758 * y + 0.0415 * z,
        0.0557 * x - 0.2040 * y + 1.0570 * z,
    ]
}

/// sRGB transfer function (IEC 61966-2-1), linear 0..1 to 8-bit.
fn encode(c: f64) -> u8 {
    let c = c.clamp(0.0, 1.0);
    let v = if c <= 0.0031308 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    };
    (v * 255.0).round() as u8
}

/// The sRGB colour of L*, C*, h, with the chroma reduced (lightness and hue
/// kept) until it lies inside the sRGB gamut.
pub fn lch_to_srgb(l: f64, c: f64, h: f64) -> RGBColor {
    let mut chroma = c.max(0.0);
    loop {
        let (a, b) = (chroma * h.to_radians().cos(), chroma * h.to_radians().sin());
        let rgb = lab_to_linear_srgb(l, a, b);
        if rgb.iter().all(|v| (-1e-4..=1.0 + 1e-4).contains(v)) || chroma <= 0.0 {
            return RGBColor(encode(rgb[0]), encode(rgb[1]), encode(rgb[2]));
        }
        chroma = (chroma - 0.5).max(0.0);
    }
}

/// CIE 1976 lightness L* of an 8-bit sRGB colour: linearise (IEC 61966-2-1),
/// relative luminance Y with the sRGB/Rec. 709 weights, then
/// L* = 116 f(Y) - 16 with f(t) = t^(1/3) above (6/29)^3 (CIE 15:2004).
pub fn cie_lightness(colour: RGBColor) -> f64 {
    let lin = |c: u8| {
        let c = c as f64 / 255.0;
        if c <= 0.04045 {
            c / 12.92
        } else {
            ((c + 0.055) / 1.055).powf(2.4)
        }
    };
    let y = 0.2126 * lin(colour.0) + 0.7152 * lin(colour.1) + 0.0722 * lin(colour.2);
    let d = 6.0 / 29.0;
    let f = if y > d * d * d {
        y.cbrt()
    } else {
        y / (3.0 * d * d) + 4.0 / 29.0
    };
    116.0 * f - 16.0
}

impl Palette {
    pub fn is_diverging(self) -> bool {
        matches!(self, Palette::Diverging)
    }

    pub fn is_cyclic(self) -> bool {
        matches!(self, Palette::Cyclic)
    }

    /// The colour at position `t` in 0..=1 (low to high values; for the
    /// diverging and cyclic tables 0.5 is zero).
    pub fn at(self, t: f64) -> RGBColor {
        let t = if t.is_finite() {
            t.clamp(0.0, 1.0)
        } else {
            0.5
        };
        let (l, c, h) = match self {
            Palette::Sequential => along(&SEQUENTIAL, t),
            Palette::Diverging if t < 0.5 => along(&DIVERGING_NEGATIVE, t * 2.0),
            Palette::Diverging => along(&DIVERGING_POSITIVE, t * 2.0 - 1.0),
            Palette::Cyclic if t < 0.5 => along(&CYCLIC_NEGATIVE, 1.0 - t * 2.0),
            Palette::Cyclic => along(&CYCLIC_POSITIVE, t * 2.0 - 1.0),
        };
        lch_to_srgb(l, c, h)
    }

    pub fn name(self) -> &'static str {
        match self {
            Palette::Sequential => "slate to straw",
            Palette::Diverging => "blue to copper",
            Palette::Cyclic => "compass",
        }
    }
}

/// The neutral band of a signed field by default: values within this
/// fraction of the largest magnitude either side of zero are drawn white
/// (our choice: small enough to keep real signals, large enough to hide
/// rounding and interpolation noise around zero).
pub const DEFAULT_NEUTRAL_FRACTION: f64 = 0.05;

/// How a shaded field is coloured: the table, its band edges and colours.
#[derive(Debug, Clone)]
pub(crate) struct ShadingPlan {
    pub palette: Palette,
    pub levels: Vec<f64>,
    pub colours: Vec<RGBAColor>,
    /// Half-width of the white band around zero (signed fields), if any.
    pub neutral: Option<f64>,
}

/// Choose the table (diverging when the data take both signs, sequential
/// otherwise, unless given), the band edges and the colours. For a diverging
/// table the bands touching zero are replaced by one white band of
/// half-width `neutral_fraction` times the largest magnitude, so noise close
/// to zero does not tint the map.
pub(crate) fn plan_shading(
    levels: &Levels,
    lo: f64,
    hi: f64,
    palette: Option<Palette>,
    neutral_fraction: Option<f64>,
) -> ShadingPlan {
    let palette = palette.unwrap_or(if lo < 0.0 && hi > 0.0 {
        Palette::Diverging
    } else {
        Palette::Sequential
    });
    let mut edges = shading_levels(levels, lo, hi, palette.is_diverging());
    let mut neutral = None;
    if palette.is_diverging() {
        let m = edges.iter().fold(0.0f64, |a, b| a.max(b.abs()));
        let w = m * neutral_fraction.unwrap_or(DEFAULT_NEUTRAL_FRACTION).clamp(0.0, 0.5);
        if w > 0.0 && edges.len() > 2 {
            edges.retain(|l| l.abs() >= w - 1e-12 * m);
            edges.push(-w);
            edges.push(w);
            edges.sort_by(|a, b| a.total_cmp(b));
            edges.dedup_by(|a, b| (*a - *b).abs() <= 1e-9 * m);
            neutral = Some(w);
        }
    }
    let colours = band_colours(&edges, palette, neutral);
    ShadingPlan {
        palette,
        levels: edges,
        colours,
        neutral,
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

/// Colours of the bands between consecutive levels. For a diverging table
/// the colour depends on the band's value relative to the largest absolute
/// level, so zero stays white even when the levels are not symmetric; a band
/// inside the neutral half-width is white, and the others start a visible
/// step away from white. For the cyclic table the band's middle value is
/// read as an angle in degrees over -180..180.
pub(crate) fn band_colours(levels: &[f64], palette: Palette, neutral: Option<f64>) -> Vec<RGBAColor> {
    let n = levels.len().saturating_sub(1);
    if n == 0 {
        return Vec::new();
    }
    match palette {
        Palette::Diverging => {
            let m = levels.iter().fold(0.0f64, |a, b| a.max(b.abs()));
            let m = if m > 0.0 { m } else { 1.0 };
            let w = neutral.unwrap_or(0.0).min(m);
            levels
                .windows(2)
                .map(|pair| {
                    let mid = 0.5 * (pair[0] + pair[1]);
                    if w > 0.0 && mid.abs() < w {
                        return RGBAColor(255, 255, 255, 1.0);
                    }
                    // Away from white by at least 12% of the half table;
                    // the ends kept in from the darkest so text stays readable.
                    let x = if w > 0.0 { (mid.abs() - w) / (m - w).max(1e-12) } else { mid.abs() / m };
                    let t = 0.12 + 0.85 * x.clamp(0.0, 1.0);
                    RGBAColor::from(palette.at(0.5 + 0.5 * t * mid.signum()))
                })
                .collect()
        }
        Palette::Cyclic => levels
            .windows(2)
            .map(|pair| {
                let mid = 0.5 * (pair[0] + pair[1]);
                let wrapped = (mid + 180.0).rem_euclid(360.0) - 180.0;
                RGBAColor::from(palette.at((wrapped + 180.0) / 360.0))
            })
            .collect(),
        Palette::Sequential => (0..n)
            .map(|i| {
                let t = if n == 1 {
                    0.5
                } else {
                    i as f64 / (n - 1) as f64
                };
                RGBAColor::from(palette.at(0.02 + 0.96 * t))
            })
            .collect(),
    }
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
    fn diverging_table_puts_copper_on_positive_and_blue_on_negative_values() {
        let levels = [-2.0, -1.0, 0.0, 1.0, 2.0];
        let c = band_colours(&levels, Palette::Diverging, None);
        let warm = c[3];
        let cool = c[0];
        assert!(warm.0 > warm.2, "positive band should be warm: {warm:?}");
        assert!(cool.2 > cool.0, "negative band should be blue: {cool:?}");
    }

    fn lightness_at(p: Palette, t: f64) -> f64 {
        cie_lightness(p.at(t))
    }

    #[test]
    fn sequential_table_rises_in_cie_lightness_from_end_to_end() {
        // CIE L* from sRGB: IEC 61966-2-1 linearisation, CIE 15:2004 L*.
        // A perceptually ordered table has strictly increasing L*; 8-bit
        // rounding moves L* by well under 0.5.
        let l: Vec<f64> = (0..=100).map(|k| lightness_at(Palette::Sequential, k as f64 / 100.0)).collect();
        for pair in l.windows(2) {
            assert!(pair[1] > pair[0] + 0.2, "L* not increasing: {l:?}");
        }
        assert!(l[0] < 40.0 && l[100] > 90.0, "range {} to {}", l[0], l[100]);
    }

    #[test]
    fn diverging_and_cyclic_tables_darken_steadily_away_from_white_zero() {
        for p in [Palette::Diverging, Palette::Cyclic] {
            let centre = lightness_at(p, 0.5);
            assert!(centre > 95.0, "{}: centre L* {centre}", p.name());
            for side in [-1.0, 1.0] {
                let l: Vec<f64> = (0..=50).map(|k| lightness_at(p, 0.5 + side * k as f64 / 100.0)).collect();
                for pair in l.windows(2) {
                    assert!(pair[1] < pair[0] - 0.2, "{}: L* not falling away from zero: {l:?}", p.name());
                }
            }
            // The halves match in lightness (neither sign looks stronger).
            for k in 0..=50 {
                let (a, b) = (lightness_at(p, 0.5 - k as f64 / 100.0), lightness_at(p, 0.5 + k as f64 / 100.0));
                assert!((a - b).abs() < 2.0, "{}: {a} against {b} at {k}", p.name());
            }
        }
    }

    #[test]
    fn cie_lightness_of_reference_colours() {
        // CIE 15:2004: white L* = 100, black 0; sRGB mid grey 119 has
        // L* = 50.0 (a worked value: Y = 0.1845, 116 * Y^(1/3) - 16).
        assert!((cie_lightness(RGBColor(255, 255, 255)) - 100.0).abs() < 0.01);
        assert!(cie_lightness(RGBColor(0, 0, 0)).abs() < 0.01);
        assert!((cie_lightness(RGBColor(119, 119, 119)) - 50.0).abs() < 0.3);
    }

    #[test]
    fn cyclic_table_has_no_jump_where_the_angle_wraps() {
        let (a, b) = (Palette::Cyclic.at(0.0), Palette::Cyclic.at(1.0));
        assert_eq!(a, b);
        // Bands either side of 180 degrees: -180..-150 and 150..180 differ
        // only as neighbours do.
        let levels: Vec<f64> = (-6..=6).map(|k| k as f64 * 30.0).collect();
        let c = band_colours(&levels, Palette::Cyclic, None);
        let (first, last) = (c[0], c[c.len() - 1]);
        let distance = |x: RGBAColor, y: RGBAColor| ((x.0 as f64 - y.0 as f64).powi(2) + (x.1 as f64 - y.1 as f64).powi(2) + (x.2 as f64 - y.2 as f64).powi(2)).sqrt();
        assert!(distance(first, last) < distance(c[5], c[6]) + 40.0, "{first:?} {last:?}");
    }

    #[test]
    fn signed_fields_get_a_white_neutral_band_of_the_stated_width() {
        let plan = plan_shading(&Levels::Auto, -10.0, 8.0, None, Some(0.1));
        assert_eq!(plan.palette, Palette::Diverging);
        let w = plan.neutral.expect("a neutral band");
        assert!((w - 1.0).abs() < 1e-9, "10% of 10 is 1, got {w}");
        let k = plan.levels.iter().position(|l| (*l + w).abs() < 1e-9).expect("edge at -w");
        assert!((plan.levels[k + 1] - w).abs() < 1e-9);
        let white = plan.colours[k];
        assert_eq!((white.0, white.1, white.2), (255, 255, 255));
        // Every other band is tinted.
        for (i, c) in plan.colours.iter().enumerate() {
            if i != k {
                assert!((c.0, c.1, c.2) != (255, 255, 255), "band {i} is white");
            }
        }
    }

    #[test]
    fn values_format_with_the_decimals_of_the_step_and_a_true_minus_sign() {
        assert_eq!(format_value(5460.0, 60.0), "5460");
        assert_eq!(format_value(-0.5, 0.25), "\u{2212}0.50");
        assert_eq!(format_value(-0.0, 1.0), "0");
        assert_eq!(format_value(f64::NAN, 1.0), "missing");
    }
}

//! Selections and levels: `at`, `over` and time selections, levels and
//! times against the data, points on the grid.

#[allow(unused_imports)]
use std::fmt::Write as _;

use super::*;

impl<'e> Checker<'e> {
    /// Warns when a point lies outside the current dataset's grid (it may be
    /// meant for another dataset, so this is not an error).
    #[inline(never)]
    pub(super) fn point_on_grid(&mut self, kinds: &[Type], span: Span) {
        let (Some(Type::Angle { degrees: Some(latitude), .. }), Some(Type::Angle { degrees: Some(longitude), .. })) =
            (kinds.first(), kinds.get(1))
        else {
            return;
        };
        let Some(info) = self.known_dataset() else { return };
        let (Some((south, north)), Some((west, east))) = (info.latitude_range, info.longitude_range) else { return };
        let tolerance = 1e-9;
        let inside_latitude = *latitude >= south - tolerance && *latitude <= north + tolerance;
        // Longitudes wrap: measure eastward from the western edge.
        let width = east - west;
        let inside_longitude =
            width >= 360.0 || (longitude - west).rem_euclid(360.0) <= width.rem_euclid(360.0) + tolerance;
        if inside_latitude && inside_longitude {
            return;
        }
        let name = info.name.clone();
        let angle = |value: f64, positive: &str, negative: &str| {
            format!("{} {}", format_number(value.abs()), if value < 0.0 { negative } else { positive })
        };
        let extent = format!(
            "{} to {}, {} to {}",
            angle(south, "north", "south"),
            angle(north, "north", "south"),
            angle(west, "east", "west"),
            angle(east, "east", "west")
        );
        self.report(
            Diagnostic::warning(format!("this point lies outside the grid of {name}"), span)
                .with_label("no data here")
                .with_help(format!("the grid covers {extent}")),
        );
    }

    /// A time step number within the data, or a time string.
    #[inline(never)]
    pub(super) fn time_argument(&mut self, kind: &Type, span: Span) -> bool {
        match kind {
            Type::String(_) => self.time_of(kind, span).is_some(),
            Type::Number { value: Some(index), .. } => {
                let Some(axis) = self.known_dataset().and_then(|info| info.times.clone()) else { return true };
                if *index >= axis.count as f64 {
                    self.error(
                        format!("the data have no time step {}", format_number(*index)),
                        span,
                        "past the last time",
                    )
                    .help = Some(format!(
                        "the data have {} times, numbered 0 to {} ({} to {})",
                        axis.count,
                        axis.count.saturating_sub(1),
                        axis.first,
                        axis.last
                    ));
                    return false;
                }
                true
            }
            _ => true,
        }
    }

    /// Levels and layers given to an operator must lie within the data.
    pub(super) fn level_ranges(&mut self, builtin: &Builtin, arguments: &[Expr], kinds: &[Type]) {
        for ((parameter, argument), kind) in builtin.parameters.iter().zip(arguments).zip(kinds) {
            let pressures: Vec<f64> = match kind {
                Type::Number { unit, value: Some(value) } if is_pressure(unit) => {
                    to_pascal(*value, unit).into_iter().collect()
                }
                Type::Layer { bottom, top } => bottom.iter().chain(top.iter()).copied().collect(),
                _ => continue,
            };
            if pressures.is_empty() {
                continue;
            }
            // Which levels: a field argument's, else the first role needed.
            let field_levels = kinds.iter().find_map(|kind| match kind {
                Type::Field(FieldType { levels: Levels::Known(levels), origin, .. }) => {
                    Some((levels.clone(), origin.clone().unwrap_or_else(|| "the field".to_string())))
                }
                _ => None,
            });
            let role_levels = || {
                let info = self.known_dataset()?;
                builtin.requires.iter().flat_map(|requirement| requirement.any_of.iter()).find_map(|role| {
                    let variable = info.role(role)?;
                    (!variable.levels_pa.is_empty()).then(|| (variable.levels_pa.clone(), role.to_string()))
                })
            };
            let Some((levels, origin)) = field_levels.or_else(role_levels) else { continue };
            let _ = parameter;
            for pressure in pressures {
                self.level_in_range(pressure, &levels, &origin, argument.span);
            }
        }
    }

    /// Reports a pressure outside `levels`; true when inside.
    pub(super) fn level_in_range(&mut self, pressure: f64, levels: &[f64], origin: &str, span: Span) -> bool {
        let highest = levels.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let lowest = levels.iter().copied().fold(f64::INFINITY, f64::min);
        if levels.is_empty() || (pressure <= highest * (1.0 + 1e-9) && pressure >= lowest * (1.0 - 1e-9)) {
            return true;
        }
        let message = if pressure > highest {
            format!("{} is below the lowest level of {origin} ({})", format_pressure(pressure), format_pressure(highest))
        } else {
            format!("{} is above the highest level of {origin} ({})", format_pressure(pressure), format_pressure(lowest))
        };
        self.error(message, span, "outside the data")
            .help = Some(format!("the levels of {origin} are {}", format_levels(levels)));
        false
    }

    /// A time value: `Some(Some(normalised))` when known, `Some(None)` when a
    /// time whose value is not known, `None` (reported) when not a time.
    pub(super) fn time_of(&mut self, kind: &Type, span: Span) -> Option<Option<String>> {
        match kind {
            Type::Time { at } => Some(at.clone()),
            Type::String(Some(text)) => match normalise_time(text) {
                Some(time) => {
                    self.time_in_data(&time, span);
                    Some(Some(time))
                }
                None => {
                    self.error(format!("\"{text}\" is not a time"), span, "not a time")
                        .help = Some("write times as \"YYYY-MM-DD HH:MM\" (UTC), such as \"2026-10-14 06:00\"".to_string());
                    None
                }
            },
            Type::String(None) => Some(None),
            _ => None,
        }
    }

    pub(super) fn time_in_data(&mut self, time: &str, span: Span) {
        let Some(axis) = self.known_dataset().and_then(|info| info.times.clone()) else { return };
        let (Some(first), Some(last)) = (normalise_time(&axis.first), normalise_time(&axis.last)) else { return };
        if time < first.as_str() || time > last.as_str() {
            self.error(format!("{} is outside the times of the data", &time[..16]), span, "no data at this time")
                .help = Some(format!("the data run from {} to {} ({} times)", axis.first, axis.last, axis.count));
        }
    }

    #[inline(never)]
    pub(super) fn select(&mut self, base_kind: Type, selector_kind: Type, base: &Expr, how: SelectHow, selector: &Expr, span: Span) -> Type {
        let word = how.word();
        let field = match &base_kind {
            Type::Unknown => return Type::Unknown,
            Type::Field(field) => field.clone(),
            other => {
                self.error(format!("only a field can be selected with `{word}`"), base.span, format!("this is {}", other.describe()))
                    .help = Some("select from fields such as temperature or wind, or results of operators".to_string());
                return Type::Unknown;
            }
        };
        if selector_kind.is_unknown() {
            return Type::Unknown;
        }
        let what = field.origin.clone().map_or_else(|| "this field".to_string(), |origin| format!("`{origin}`"));
        let mut result = field.clone();
        result.origin = field.origin.clone();
        let wrong = |checker: &mut Self, expected: &str, help: String| {
            checker
                .error(format!("`{word}` needs {expected}"), selector.span, format!("this is {}", selector_kind.describe()))
                .help = Some(help);
            Type::Unknown
        };
        match how {
            SelectHow::At => match &selector_kind {
                Type::Number { unit, value } if is_pressure(unit) => {
                    match &field.levels {
                        Levels::None => {
                            self.error(format!("{what} has no pressure levels to select"), span, "no levels to select from")
                                .help = Some("it has no level dimension (it is on one level, of a layer, or at the surface); leave out the level".to_string());
                            return Type::Unknown;
                        }
                        Levels::Known(levels) => {
                            if let Some(pressure) = value.and_then(|value| to_pascal(value, unit)) {
                                let origin = field.origin.clone().unwrap_or_else(|| "this field".to_string());
                                if !self.level_in_range(pressure, levels, &origin, selector.span) {
                                    return Type::Unknown;
                                }
                            }
                        }
                        Levels::Unknown => {}
                    }
                    result.levels = Levels::None;
                    Type::Field(result)
                }
                Type::Number { unit: None, value } => wrong(
                    self,
                    "a pressure, a point or a time",
                    format!("add the unit of the level, such as {} hPa", value.map_or("500".to_string(), format_number)),
                ),
                Type::Layer { .. } => wrong(self, "one level", "to select a layer use `over`, such as temperature over 1000 hPa to 500 hPa".to_string()),
                Type::Point => {
                    if !field.horizontal {
                        self.error(format!("{what} is no longer on the horizontal grid"), span, "cannot pick a point")
                            .help = Some("pick the point before averaging or picking".to_string());
                        return Type::Unknown;
                    }
                    result.horizontal = false;
                    Type::Field(result)
                }
                Type::Time { .. } | Type::String(_) => {
                    if self.time_of(&selector_kind, selector.span).is_none() {
                        return Type::Unknown;
                    }
                    if !field.time {
                        self.error(format!("{what} has no time dimension"), span, "cannot pick a time")
                            .help = Some("it is already at one time".to_string());
                        return Type::Unknown;
                    }
                    result.time = false;
                    Type::Field(result)
                }
                Type::Region => wrong(self, "a level, a point or a time", "to select a region use `in`".to_string()),
                Type::TimeRange => wrong(self, "a level, a point or a time", "to select a time range use `during`".to_string()),
                _ => wrong(self, "a pressure such as 500 hPa, a point or a time", "such as temperature at 500 hPa".to_string()),
            },
            SelectHow::Over => match &selector_kind {
                Type::Layer { bottom, top } => {
                    match &field.levels {
                        Levels::None => {
                            self.error(format!("{what} has no pressure levels to select a layer from"), span, "no levels")
                                .help = Some("layer operators such as thickness(layer) take the layer as an argument".to_string());
                            return Type::Unknown;
                        }
                        Levels::Known(levels) => {
                            let origin = field.origin.clone().unwrap_or_else(|| "this field".to_string());
                            for pressure in bottom.iter().chain(top.iter()) {
                                if !self.level_in_range(*pressure, levels, &origin, selector.span) {
                                    return Type::Unknown;
                                }
                            }
                            if let (Some(bottom), Some(top)) = (bottom, top) {
                                let inside: Vec<f64> =
                                    levels.iter().copied().filter(|level| level <= bottom && level >= top).collect();
                                result.levels = Levels::Known(inside);
                            }
                        }
                        Levels::Unknown => {}
                    }
                    Type::Field(result)
                }
                Type::Number { unit, .. } if is_pressure(unit) => {
                    wrong(self, "a layer", "to pick one level use `at`; a layer is written 1000 hPa to 500 hPa".to_string())
                }
                _ => wrong(self, "a pressure layer such as 1000 hPa to 500 hPa", "such as temperature over 1000 hPa to 500 hPa".to_string()),
            },
            SelectHow::In => match &selector_kind {
                Type::Region => {
                    if !field.horizontal {
                        self.error(format!("{what} is no longer on the horizontal grid"), span, "cannot select a region")
                            .help = Some("select the region before averaging or picking a point".to_string());
                        return Type::Unknown;
                    }
                    Type::Field(result)
                }
                Type::Point => wrong(self, "a region", "to pick a point use `at`".to_string()),
                _ => wrong(self, "a region", "such as wind in box(40 north to 65 north, 50 west to 5 east)".to_string()),
            },
            SelectHow::During => match &selector_kind {
                Type::TimeRange => {
                    if !field.time {
                        self.error(format!("{what} has no time dimension"), span, "cannot select times")
                            .help = Some("it is already at one time".to_string());
                        return Type::Unknown;
                    }
                    Type::Field(result)
                }
                Type::Time { .. } | Type::String(_) => wrong(self, "a time range", "to pick one time use `at`".to_string()),
                _ => wrong(self, "a time range", "such as during \"2026-10-14 00:00\" to \"2026-10-15 00:00\"".to_string()),
            },
        }
    }
}

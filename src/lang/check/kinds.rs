//! Kinds and units: literals, units written in the source, members, unary
//! and binary operators, ranges and conversions.

#[allow(unused_imports)]
use std::fmt::Write as _;

use super::*;

impl<'e> Checker<'e> {
    #[inline(never)]
    pub(super) fn literal(&mut self, expr: &Expr) -> Type {
        match &expr.kind {
            ExprKind::Number { value, unit: None } => Type::Number { unit: None, value: Some(*value) },
            ExprKind::Number { value, unit: Some(text) } => match self.unit(text) {
                Some(unit) => Type::Number { unit: Some(unit), value: Some(*value) },
                None => Type::Unknown,
            },
            ExprKind::Angle { value, hemisphere } => {
                let (axis, limit) =
                    if hemisphere.is_latitude() { (AngleAxis::Latitude, 90.0) } else { (AngleAxis::Longitude, 360.0) };
                if *value > limit {
                    let what = if axis == AngleAxis::Latitude { "latitude" } else { "longitude" };
                    self.error(format!("a {what} is at most {} degrees", format_number(limit)), expr.span, "out of range")
                        .help = Some(if axis == AngleAxis::Latitude {
                        "latitudes run from 90 south to 90 north".to_string()
                    } else {
                        "longitudes run from 180 west to 180 east (or 0 to 360 east)".to_string()
                    });
                    return Type::Unknown;
                }
                let sign = if matches!(hemisphere, Hemisphere::South | Hemisphere::West) { -1.0 } else { 1.0 };
                Type::Angle { axis, degrees: Some(sign * value) }
            }
            _ => Type::Unknown,
        }
    }

    #[inline(never)]
    pub(super) fn if_kind(
        &mut self,
        condition_kind: Type,
        then_kind: Type,
        else_kind: Type,
        condition: &Expr,
        then_branch: &Expr,
        else_branch: &Expr,
    ) -> Type {
        let is_field_condition = matches!(&condition_kind, Type::Field(field) if field.component == Component::Boolean);
        if !matches!(condition_kind, Type::Bool | Type::Unknown) && !is_field_condition {
            self.error("the condition of `if` must be true or false", condition.span, condition_kind.describe())
                .help = Some("compare something, such as if temperature > 273.15 K then ...".to_string());
        }
        if let Some(problem) = incompatible(&then_kind, &else_kind) {
            self.error("the two branches of `if` give different kinds of value", then_branch.span.to(else_branch.span), problem)
                .help = Some("make both branches the same kind, with units of the same dimension".to_string());
            return Type::Unknown;
        }
        match (&then_kind, is_field_condition) {
            (Type::Unknown, _) => else_kind,
            (Type::Number { unit, .. }, true) => Type::Field(FieldType {
                component: Component::Scalar,
                unit: unit.clone(),
                levels: Levels::Unknown,
                time: false,
                horizontal: true,
                origin: None,
            }),
            (Type::Number { unit, .. }, false) => Type::number(unit.clone()),
            _ => then_kind,
        }
    }

    pub(super) fn unit(&mut self, text: &UnitText) -> Option<Unit> {
        match Unit::parse(&text.text) {
            Ok(unit) => Some(unit),
            Err(error) => {
                let first_word: String = text.text.chars().take_while(|c| c.is_alphanumeric() || *c == '_').collect();
                let mut help = format!(
                    "units are written like {}, with exponents such as m2 s-2 and K/(100 km)",
                    KNOWN_UNIT_WORDS[..8].join(", ")
                );
                if let Some(suggestion) = did_you_mean(&first_word, KNOWN_UNIT_WORDS.iter().copied()) {
                    help = format!("did you mean `{suggestion}`?");
                } else if self.name_exists(&first_word) {
                    help = format!("to multiply by `{first_word}`, write `*` between the number and the name");
                }
                let detail = error.to_string();
                let diagnostic = self.error(format!("unknown unit `{}`", text.text), text.span, "not a known unit");
                diagnostic.help = Some(help);
                if !detail.starts_with("unknown unit") {
                    diagnostic.notes.push(detail);
                }
                None
            }
        }
    }

    #[inline(never)]
    pub(super) fn member(&mut self, kind: Type, member: &Identifier) -> Type {
        let name = member.name.as_str();
        let members: &[(&str, &str)] = match &kind {
            Type::Unknown => return Type::Unknown,
            Type::Dataset(alias) => {
                let Some(info) = self.scope.datasets.get(alias).cloned() else { return Type::Unknown };
                if let Some(kind) = dataset_name(&info, name) {
                    return kind;
                }
                let names: Vec<String> = info.variables.iter().map(|variable| variable.name.clone()).chain(info.role_names()).collect();
                let suggestion = did_you_mean(name, names.iter().map(String::as_str));
                let diagnostic = self.error(format!("the dataset `{alias}` has no `{name}`"), member.span, "not in this dataset");
                diagnostic.help = Some(match suggestion {
                    Some(suggestion) => format!("did you mean `{suggestion}`?"),
                    None => describe_dataset(&info),
                });
                return Type::Unknown;
            }
            Type::Field(field) if field.component == Component::Vector => {
                let scalar = |unit: Option<Unit>| {
                    Type::Field(FieldType { component: Component::Scalar, unit, origin: None, ..field.clone() })
                };
                match name {
                    "eastward" | "northward" | "speed" => return scalar(field.unit.clone()),
                    "direction" => return scalar(DEGREE.clone()),
                    _ => builtins::VECTOR_MEMBERS,
                }
            }
            Type::Layer { bottom, top } => match name {
                "bottom" => return Type::Number { unit: PASCAL.clone(), value: *bottom },
                "top" => return Type::Number { unit: PASCAL.clone(), value: *top },
                _ => builtins::LAYER_MEMBERS,
            },
            Type::Point => match name {
                "latitude" => return Type::Angle { axis: AngleAxis::Latitude, degrees: None },
                "longitude" => return Type::Angle { axis: AngleAxis::Longitude, degrees: None },
                _ => builtins::POINT_MEMBERS,
            },
            Type::Region => match name {
                "latitude" => return Type::LatitudeRange,
                "longitude" => return Type::LongitudeRange,
                _ => builtins::REGION_MEMBERS,
            },
            _ => &[],
        };
        let names: Vec<&str> = members.iter().map(|(name, _)| *name).collect();
        let diagnostic = self.error(format!("{} has no member `.{name}`", kind.describe()), member.span, "no such member");
        diagnostic.help = Some(if names.is_empty() {
            "members exist on vector fields (.eastward, .northward, .speed, .direction), layers (.bottom, .top), points and regions (.latitude, .longitude)".to_string()
        } else {
            match did_you_mean(name, names.iter().copied()) {
                Some(suggestion) => format!("did you mean `.{suggestion}`?"),
                None => format!(
                    "its members are {}",
                    list_words(&names.iter().map(|name| format!(".{name}")).collect::<Vec<_>>(), "and")
                ),
            }
        });
        Type::Unknown
    }

    #[inline(never)]
    pub(super) fn unary(&mut self, operator: UnaryOperator, kind: Type, operand: &Expr, span: Span) -> Type {
        match operator {
            UnaryOperator::Negate => match kind {
                Type::Number { unit, value } => Type::Number { unit, value: value.map(|value| -value) },
                Type::Field(ref field) if field.component != Component::Boolean => kind,
                Type::Angle { axis, degrees } => Type::Angle { axis, degrees: degrees.map(|degrees| -degrees) },
                Type::Unknown => Type::Unknown,
                other => {
                    self.error(format!("cannot negate {}", other.describe()), span, "`-` needs a number or a field")
                        .help = Some("only numbers and fields have a negative".to_string());
                    Type::Unknown
                }
            },
            UnaryOperator::Not => match kind {
                Type::Bool | Type::Unknown => kind,
                Type::Field(ref field) if field.component == Component::Boolean => kind,
                other => {
                    self.error("`not` needs a true/false value", operand.span, format!("this is {}", other.describe()))
                        .help = Some("compare first, such as not (speed(wind) > 20 m/s)".to_string());
                    Type::Unknown
                }
            },
        }
    }

    #[inline(never)]
    pub(super) fn binary(&mut self, operator: BinaryOperator, left_kind: Type, right_kind: Type, left: &Expr, right: &Expr, span: Span) -> Type {
        if left_kind.is_unknown() || right_kind.is_unknown() {
            return Type::Unknown;
        }
        use BinaryOperator::*;
        match operator {
            And | Or => {
                let boolean = |kind: &Type| {
                    matches!(kind, Type::Bool) || matches!(kind, Type::Field(field) if field.component == Component::Boolean)
                };
                for (kind, expr) in [(&left_kind, left), (&right_kind, right)] {
                    if !boolean(kind) {
                        self.error(format!("`{}` joins true/false values", operator.symbol()), expr.span, format!("this is {}", kind.describe()))
                            .help = Some("compare first, such as speed(wind) > 20 m/s and temperature < 273.15 K".to_string());
                        return Type::Unknown;
                    }
                }
                if let Type::Field(field) = &left_kind { Type::Field(field.clone()) } else { right_kind }
            }
            Less | LessEqual | Greater | GreaterEqual | Equal | NotEqual => {
                if let (Type::String(_), Type::String(_)) | (Type::Bool, Type::Bool) = (&left_kind, &right_kind) {
                    if matches!(operator, Equal | NotEqual) {
                        return Type::Bool;
                    }
                }
                let Some(unit) = self.same_quantity(operator, &left_kind, &right_kind, left, right, span) else {
                    return Type::Unknown;
                };
                let _ = unit;
                match field_of(&left_kind).or_else(|| field_of(&right_kind)) {
                    Some(field) => Type::Field(FieldType { component: Component::Boolean, unit: None, origin: None, ..field.clone() }),
                    None => Type::Bool,
                }
            }
            Add | Subtract => {
                if let (Some(a), Some(b)) = (component_of(&left_kind), component_of(&right_kind)) {
                    if a != b {
                        self.error(
                            format!("cannot {} a {} and a {}", if operator == Add { "add" } else { "subtract" }, component_word(a), component_word(b)),
                            span,
                            format!("{} and {}", left_kind.describe(), right_kind.describe()),
                        )
                        .help = Some("take a component (.eastward, .northward) or the speed of the vector first".to_string());
                        return Type::Unknown;
                    }
                }
                let Some(unit) = self.same_quantity(operator, &left_kind, &right_kind, left, right, span) else {
                    return Type::Unknown;
                };
                match (&left_kind, &right_kind) {
                    (Type::Number { value: Some(a), unit: left_unit }, Type::Number { value: Some(b), unit: right_unit }) => {
                        let b = convert_value(*b, right_unit, left_unit).unwrap_or(*b);
                        let value = if operator == Add { a + b } else { a - b };
                        Type::Number { unit, value: Some(value) }
                    }
                    (Type::Number { .. }, Type::Number { .. }) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
            Multiply | Divide => {
                let (Some(left_unit), Some(right_unit)) = (left_kind.unit().cloned(), right_kind.unit().cloned()) else {
                    let culprit = if left_kind.unit().is_none() { (&left_kind, left) } else { (&right_kind, right) };
                    self.error(
                        format!("cannot {} {}", if operator == Multiply { "multiply" } else { "divide" }, culprit.0.describe()),
                        culprit.1.span,
                        "not a number or field",
                    )
                    .help = Some("arithmetic works on numbers and fields".to_string());
                    return Type::Unknown;
                };
                let (left_component, right_component) = (component_of(&left_kind), component_of(&right_kind));
                if left_component == Some(Component::Boolean) || right_component == Some(Component::Boolean) {
                    self.error("cannot do arithmetic on a true/false field", span, "true/false field")
                        .help = Some("use `if ... then ... else` to choose values".to_string());
                    return Type::Unknown;
                }
                let vector_right = right_component == Some(Component::Vector);
                let vector_left = left_component == Some(Component::Vector);
                if vector_right && (vector_left || operator == Divide) {
                    self.error(
                        format!("cannot {} by a vector field", if operator == Multiply { "multiply" } else { "divide" }),
                        right.span,
                        "a vector",
                    )
                    .help = Some(if operator == Multiply {
                        "for the dot product of two vectors use dot(a, b)".to_string()
                    } else {
                        "divide by its speed, such as speed(v)".to_string()
                    });
                    return Type::Unknown;
                }
                let unit = match (left_unit, right_unit) {
                    (None, None) => None,
                    (Some(unit), None) => Some(unit),
                    (None, Some(unit)) => Some(if operator == Multiply { unit } else { power(&unit, -1) }),
                    (Some(a), Some(b)) => Some(if operator == Multiply { times(&a, &b) } else { over(&a, &b) }),
                };
                match (&left_kind, &right_kind) {
                    (Type::Number { value: Some(a), .. }, Type::Number { value: Some(b), .. }) => {
                        let value = if operator == Multiply { a * b } else { a / b };
                        Type::Number { unit, value: value.is_finite().then_some(value) }
                    }
                    (Type::Number { .. }, Type::Number { .. }) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
            Power => {
                let Some(base_unit) = left_kind.unit().cloned() else {
                    self.error(format!("cannot raise {} to a power", left_kind.describe()), left.span, "not a number or field");
                    return Type::Unknown;
                };
                if component_of(&left_kind) == Some(Component::Vector) {
                    self.error("cannot raise a vector field to a power", left.span, "a vector")
                        .help = Some("take its speed first, such as speed(v) ^ 2".to_string());
                    return Type::Unknown;
                }
                let exponent = match &right_kind {
                    Type::Number { unit, value } if is_dimensionless(unit) => *value,
                    other => {
                        self.error("an exponent must be a pure number", right.span, format!("this is {}", other.describe()));
                        return Type::Unknown;
                    }
                };
                let unit = match base_unit {
                    None => None,
                    Some(unit) if is_dimensionless(&Some(unit.clone())) => Some(unit),
                    Some(unit) => match exponent {
                        Some(exponent) if exponent.fract() == 0.0 && exponent.abs() <= 64.0 => Some(power(&unit, exponent as i32)),
                        _ => {
                            self.error(
                                "a quantity with a unit can only be raised to a whole number written in the program",
                                right.span,
                                "not a known whole number",
                            )
                            .help = Some(format!("write the exponent as a number, such as {}^2", left));
                            return Type::Unknown;
                        }
                    },
                };
                match (&left_kind, exponent) {
                    (Type::Number { value: Some(base), .. }, Some(exponent)) => {
                        let value = base.powf(exponent);
                        Type::Number { unit, value: value.is_finite().then_some(value) }
                    }
                    (Type::Number { .. }, _) => Type::number(unit),
                    _ => combine_fields(&left_kind, &right_kind, unit),
                }
            }
        }
    }

    /// For `+ - < ...`: both sides must have the same dimension. Returns the
    /// unit of the result (the left's) or `None` after reporting.
    pub(super) fn same_quantity(
        &mut self,
        operator: BinaryOperator,
        left_kind: &Type,
        right_kind: &Type,
        left: &Expr,
        right: &Expr,
        span: Span,
    ) -> Option<Option<Unit>> {
        let verb = match operator {
            BinaryOperator::Add => "add",
            BinaryOperator::Subtract => "subtract",
            _ => "compare",
        };
        let (Some(left_unit), Some(right_unit)) = (left_kind.unit(), right_kind.unit()) else {
            let culprit = if left_kind.unit().is_none() { (left_kind, left) } else { (right_kind, right) };
            let diagnostic = self.error(format!("cannot {verb} {}", culprit.0.describe()), culprit.1.span, "not a number or field");
            diagnostic.help = Some(match culprit.0 {
                Type::Layer { .. } => "use .bottom or .top for the pressures of a layer".to_string(),
                Type::Angle { .. } => "angles name positions; use them in point(...) and box(...)".to_string(),
                _ => "arithmetic and comparison work on numbers and fields".to_string(),
            });
            return None;
        };
        let compatible = match (left_unit, right_unit) {
            (None, None) => true,
            (Some(a), Some(b)) => same_dimension(a, b),
            (None, Some(unit)) | (Some(unit), None) => is_dimensionless(&Some(unit.clone())),
        };
        if compatible {
            return Some(left_unit.clone().or_else(|| right_unit.clone()));
        }
        let (first, second) = (left_kind.describe(), right_kind.describe());
        let message = match operator {
            BinaryOperator::Add => format!("cannot add {second} to {first}"),
            BinaryOperator::Subtract => format!("cannot subtract {second} from {first}"),
            _ => format!("cannot compare {first} with {second}"),
        };
        let help = match (left_unit, right_unit) {
            (Some(unit), None) | (None, Some(unit)) => format!("write the number with its unit, such as 1 {unit}"),
            _ => "both sides need units of the same dimension".to_string(),
        };
        self.error(message, span, "units of different dimensions").help = Some(help);
        None
    }

    #[inline(never)]
    pub(super) fn range(&mut self, first: Type, second: Type, from: &Expr, to: &Expr, span: Span) -> Type {
        match (&first, &second) {
            (Type::Unknown, _) | (_, Type::Unknown) => Type::Unknown,
            (Type::Number { unit: a, value: x }, Type::Number { unit: b, value: y }) if is_pressure(a) && is_pressure(b) => {
                let x = x.and_then(|x| to_pascal(x, a));
                let y = y.and_then(|y| to_pascal(y, b));
                match (x, y) {
                    (Some(x), Some(y)) if (x - y).abs() <= 1e-9 * x.abs().max(1.0) => {
                        self.error("a layer needs two different pressures", span, "the same pressure twice")
                            .help = Some("such as 1000 hPa to 500 hPa".to_string());
                        Type::Unknown
                    }
                    (Some(x), Some(y)) if x < y => {
                        self.report(
                            Diagnostic::warning("this layer is written from its top down", span)
                                .with_label(format!("taken as {} to {}", format_pressure(y), format_pressure(x)))
                                .with_note("a layer runs from its bottom (the larger pressure) up to its top"),
                        );
                        Type::Layer { bottom: Some(y), top: Some(x) }
                    }
                    (x, y) => Type::Layer { bottom: x, top: y },
                }
            }
            (Type::Angle { axis: a, .. }, Type::Angle { axis: b, .. }) if a == b => {
                if *a == AngleAxis::Latitude { Type::LatitudeRange } else { Type::LongitudeRange }
            }
            (Type::Angle { .. }, Type::Angle { .. }) => {
                self.error("a range needs two latitudes or two longitudes", span, "a latitude and a longitude")
                    .help = Some("such as 40 north to 65 north, or 50 west to 5 east".to_string());
                Type::Unknown
            }
            (Type::String(_) | Type::Time { .. }, Type::String(_) | Type::Time { .. }) => {
                let a = self.time_of(&first, from.span);
                let b = self.time_of(&second, to.span);
                match (a, b) {
                    (Some(Some(a)), Some(Some(b))) if a > b => {
                        self.error("this time range ends before it starts", span, "end before start")
                            .help = Some("write the earlier time first".to_string());
                        Type::Unknown
                    }
                    (Some(_), Some(_)) => Type::TimeRange,
                    _ => Type::Unknown,
                }
            }
            (Type::Number { unit: a, .. }, Type::Number { unit: b, .. }) => {
                let compatible = match (a, b) {
                    (None, None) => true,
                    (Some(a), Some(b)) => same_dimension(a, b),
                    _ => false,
                };
                if compatible {
                    Type::NumberRange { unit: a.clone() }
                } else {
                    self.error(
                        "the two ends of a range must be of the same kind",
                        span,
                        format!("{} and {}", first.describe(), second.describe()),
                    )
                    .help = Some("such as 1000 hPa to 500 hPa".to_string());
                    Type::Unknown
                }
            }
            _ => {
                self.error(
                    "the two ends of a range must be of the same kind",
                    span,
                    format!("{} and {}", first.describe(), second.describe()),
                )
                .help = Some("ranges are of pressures (a layer), latitudes, longitudes, times or numbers".to_string());
                Type::Unknown
            }
        }
    }

    #[inline(never)]
    pub(super) fn convert(&mut self, kind: Type, value: &Expr, unit_text: &UnitText) -> Type {
        let Some(target) = self.unit(unit_text) else { return Type::Unknown };
        if kind.is_unknown() {
            return Type::Unknown;
        }
        let Some(source_unit) = kind.unit().cloned() else {
            self.error(format!("cannot express {} in {target}", kind.describe()), value.span, "has no unit")
                .help = Some("`as` converts numbers and fields that have units".to_string());
            return Type::Unknown;
        };
        // `a / 100 km as K/(100 km)` converts only `100 km`: say so.
        let binds_tight = matches!(value.kind, ExprKind::Number { .. } | ExprKind::Angle { .. })
            .then(|| format!("`as` binds tighter than arithmetic, so here it converts only `{value}`; to convert a whole expression, put it in parentheses: (...) as {target}"));
        let Some(source) = source_unit else {
            let diagnostic = self.error(format!("a pure number cannot be expressed in {target}"), value.span, "no unit to convert from");
            diagnostic.help = Some(format!("write the unit after the number instead, such as 5 {target}"));
            diagnostic.notes.extend(binds_tight);
            return Type::Unknown;
        };
        match source.conversion_to(&target) {
            Ok((factor, offset)) => match kind {
                Type::Number { value, .. } => Type::Number { unit: Some(target), value: value.map(|value| value * factor + offset) },
                Type::Field(mut field) => {
                    field.unit = Some(target);
                    Type::Field(field)
                }
                other => other,
            },
            Err(_) => {
                let expected = dimension_name(&source)
                    .map(|named| format!("`as` needs a unit of {}, such as {}", named.name, named.examples))
                    .unwrap_or_else(|| format!("`as` needs a unit convertible from {source}"));
                let diagnostic = self.error(format!("cannot express {} in {target}", kind.describe()), unit_text.span, "incompatible unit");
                diagnostic.help = Some(expected);
                diagnostic.notes.extend(binds_tight);
                Type::Unknown
            }
        }
    }
}

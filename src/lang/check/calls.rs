//! Calls and options: built-in operators, user functions and recipes,
//! their arguments, options and what the options require.

#[allow(unused_imports)]
use std::fmt::Write as _;

use super::*;

impl<'e> Checker<'e> {
    /// A call: the target is resolved, the arguments (and option values
    /// that are expressions) are checked, then the call itself.
    pub(super) fn call(&mut self, expr: &Expr, callee: &Expr, arguments: &[Expr], options: &[CallOption]) -> Type {
        let target = self.call_target(callee);
        let kinds: Vec<Type> = arguments.iter().map(|argument| self.expr(argument)).collect();
        let mut option_kinds: Vec<Option<Type>> = Vec::with_capacity(options.len());
        for option in options {
            let evaluated = match &target {
                CallTarget::Builtin(builtin) => {
                    builtin.option(&option.name.name).is_some_and(|spec| !matches!(spec.kind, OptionKind::Words(_)))
                }
                CallTarget::Recipe(_) => true,
                CallTarget::User(_) | CallTarget::Nothing => false,
            };
            option_kinds.push(if evaluated { Some(self.expr(&option.value)) } else { None });
        }
        match target {
            CallTarget::User(definition) => self.user_call(&definition, expr, kinds, arguments, options),
            CallTarget::Builtin(builtin) => self.builtin_call(builtin, expr, &kinds, arguments, options, &option_kinds),
            CallTarget::Recipe(name) => self.recipe_call(&name, arguments, options),
            CallTarget::Nothing => Type::Unknown,
        }
    }

    /// What a call calls; reports callees that cannot be called.
    #[inline(never)]
    pub(super) fn call_target(&mut self, callee: &Expr) -> CallTarget<'e> {
        let ExprKind::Name(name) = &callee.kind else {
            let kind = self.expr(callee);
            if !kind.is_unknown() {
                self.error("only a named function can be called", callee.span, kind.describe())
                    .help = Some("call a built-in operator or a function defined with `function`".to_string());
            }
            return CallTarget::Nothing;
        };
        // A local binding or parameter shadows functions.
        let bound = self
            .locals
            .iter()
            .rev()
            .find_map(|frame| frame.get(name).cloned())
            .or_else(|| self.scope.bindings.get(name).map(|binding| binding.kind.clone()));
        let target = match bound {
            Some(Type::Function(target)) => target,
            Some(Type::Recipe(target)) => return CallTarget::Recipe(target),
            Some(Type::Unknown) => return CallTarget::Nothing,
            Some(kind) => {
                let diagnostic = self.error(format!("`{name}` is not a function"), callee.span, format!("this is {}", kind.describe()));
                diagnostic.help = Some(format!("`{name}` was given a value with `let`, `parameter` or `output`; only functions can be called"));
                return CallTarget::Nothing;
            }
            None => name.clone(),
        };
        if let Some(definition) = self.scope.functions.get(&target) {
            return CallTarget::User(Box::new(definition.clone()));
        }
        if self.environment.recipes.iter().any(|recipe| recipe.name == target) {
            return CallTarget::Recipe(target);
        }
        let environment: &'e Environment<'e> = self.environment;
        if let Some(builtin) = environment.builtins.iter().find(|builtin| builtin.name == target) {
            return CallTarget::Builtin(builtin);
        }
        // The operators for pictures, tables, printing and recipes take
        // values of any kind; their arguments were checked as expressions
        // above and the evaluator checks what each needs.
        if super::builtins::PRESENTATION.contains(&target.as_str()) {
            return CallTarget::Nothing;
        }
        // Calling a dataset variable or role.
        if let Some(info) = self.known_dataset() {
            if let Some(kind) = dataset_name(info, &target) {
                let diagnostic = self.error(format!("`{target}` is not a function"), callee.span, format!("this is {}", kind.describe()));
                diagnostic.help = Some(format!("select from it instead, such as {target} at 500 hPa"));
                return CallTarget::Nothing;
            }
        }
        if self.dataset_is_opaque() && self.environment.builtins.is_empty() {
            return CallTarget::Nothing;
        }
        let functions: Vec<String> = self
            .scope
            .functions
            .keys()
            .cloned()
            .chain(self.environment.builtins.iter().map(|builtin| builtin.name.to_string()))
            .collect();
        let suggestion = did_you_mean(&target, functions.iter().map(String::as_str));
        let diagnostic = self.error(format!("unknown function `{target}`"), callee.span, "not defined");
        diagnostic.help = Some(match suggestion {
            Some(suggestion) => format!("did you mean `{suggestion}`?"),
            None => "define it with `function`, or see the list of built-in operators".to_string(),
        });
        CallTarget::Nothing
    }

    #[inline(never)]
    pub(super) fn recipe_call(&mut self, name: &str, arguments: &[Expr], options: &[CallOption]) -> Type {
        let Some(recipe) = self.environment.recipes.iter().find(|recipe| recipe.name == name).cloned() else {
            return Type::Unknown;
        };
        if let Some(first) = arguments.first() {
            let span = first.span.to(arguments.last().map_or(first.span, |last| last.span));
            self.error(format!("the recipe `{name}` takes its parameters as options"), span, "positional arguments")
                .help = Some(format!(
                "write {name}() with {} ...",
                recipe.parameters.first().map_or("parameter", String::as_str)
            ));
        }
        for option in options {
            if !recipe.parameters.contains(&option.name.name) {
                let suggestion = did_you_mean(&option.name.name, recipe.parameters.iter().map(String::as_str));
                let diagnostic = self.error(
                    format!("the recipe `{name}` has no parameter `{}`", option.name.name),
                    option.name.span,
                    "unknown parameter",
                );
                diagnostic.help = Some(match suggestion {
                    Some(suggestion) => format!("did you mean `{suggestion}`?"),
                    None => format!("its parameters are {}", list_words(&recipe.parameters, "and")),
                });
            }
        }
        Type::Unknown
    }

    pub(super) fn user_call(
        &mut self,
        definition: &FunctionDefinition,
        expr: &Expr,
        argument_kinds: Vec<Type>,
        arguments: &[Expr],
        options: &[CallOption],
    ) -> Type {
        let Some(frame) = self.user_call_frame(definition, expr, argument_kinds, arguments, options) else {
            return Type::Unknown;
        };
        let foreign = !self.local_functions.contains(&definition.name);
        self.calls.push(CallFrame { name: definition.name.clone(), call_span: expr.span, call_text: expr.to_string(), foreign });
        // The body sees its parameters and the top-level scope, not the
        // caller's locals.
        let saved = std::mem::take(&mut self.locals);
        self.locals.push(frame);
        let result = self.expr(&definition.body);
        self.locals = saved;
        self.calls.pop();
        result
    }

    /// Checks a call of a user function; the parameters' kinds if it can be
    /// checked further.
    #[inline(never)]
    pub(super) fn user_call_frame(
        &mut self,
        definition: &FunctionDefinition,
        expr: &Expr,
        argument_kinds: Vec<Type>,
        arguments: &[Expr],
        options: &[CallOption],
    ) -> Option<BTreeMap<String, Type>> {
        if let Some(first) = options.first() {
            self.error(format!("`{}` takes no options", definition.name), first.name.span, "option of a user function")
                .help = Some("functions defined with `function` take arguments only; add a parameter instead".to_string());
        }
        if arguments.len() != definition.parameters.len() {
            let names: Vec<&str> = definition.parameters.iter().map(|parameter| parameter.name.as_str()).collect();
            self.error(
                format!(
                    "`{}` takes {} but {} given",
                    definition.name,
                    count_words(names.len(), "argument"),
                    were_given(arguments.len())
                ),
                arguments_span(expr, arguments),
                "wrong number of arguments",
            )
            .help = Some(format!("call it as {}({})", definition.name, names.join(", ")));
            return None;
        }
        if self.calls.len() >= MAX_CALL_DEPTH {
            self.error("function calls are nested too deeply to check", expr.span, "too deep")
                .help = Some(format!("at most {MAX_CALL_DEPTH} functions may call one another in a chain"));
            return None;
        }
        if self.calls.iter().any(|frame| frame.name == definition.name) {
            // Recursion is rejected at definition; stop here regardless.
            return None;
        }
        Some(definition.parameters.iter().map(|parameter| parameter.name.clone()).zip(argument_kinds).collect())
    }

    #[inline(never)]
    pub(super) fn builtin_call(
        &mut self,
        builtin: &Builtin,
        expr: &Expr,
        kinds: &[Type],
        arguments: &[Expr],
        options: &[CallOption],
        option_kinds: &[Option<Type>],
    ) -> Type {
        let mut failed = false;
        if arguments.len() != builtin.parameters.len() {
            let names: Vec<&str> = builtin.parameters.iter().map(|parameter| parameter.name).collect();
            self.error(
                format!(
                    "`{}` takes {} but {} given",
                    builtin.name,
                    count_words(names.len(), "argument"),
                    were_given(arguments.len())
                ),
                arguments_span(expr, arguments),
                "wrong number of arguments",
            )
            .help = Some(format!("{}: {}", builtin.signature(), builtin.documentation));
            failed = true;
        } else {
            for ((parameter, argument), kind) in builtin.parameters.iter().zip(arguments).zip(kinds) {
                if !self.argument(builtin, parameter, argument, kind) {
                    failed = true;
                }
            }
        }
        let chosen = self.options(builtin, options, option_kinds);
        if failed {
            return Type::Unknown;
        }
        self.requirements(builtin, &chosen, expr.span);
        self.level_ranges(builtin, arguments, kinds);
        if builtin.result_kind == ResultKind::Point {
            self.point_on_grid(kinds, expr.span);
        }
        result_kind(builtin, kinds, self.known_dataset().is_none_or(DatasetInfo::has_time))
    }

    /// Checks one argument against its parameter; false if it is wrong.
    pub(super) fn argument(&mut self, builtin: &Builtin, parameter: &builtins::Parameter, argument: &Expr, kind: &Type) -> bool {
        if kind.is_unknown() {
            return true;
        }
        if accepts(parameter.kind, kind) {
            if parameter.needs_grid {
                if let Type::Field(field) = kind {
                    if !field.horizontal {
                        self.error(
                            format!("`{}` needs a field on the horizontal grid", builtin.name),
                            argument.span,
                            "no longer on the grid",
                        )
                        .help = Some(format!(
                            "`{}` differentiates across the grid; select the point or area after the call instead",
                            builtin.name
                        ));
                        return false;
                    }
                }
            }
            if parameter.kind == ParameterKind::IndexOrString {
                return self.time_argument(kind, argument.span);
            }
            return true;
        }
        let expected = parameter.kind.describe();
        let mut help = format!("{}: {}", builtin.signature(), builtin.documentation);
        match (parameter.kind, kind) {
            (ParameterKind::Layer, Type::Number { unit, .. }) if is_pressure(unit) => {
                help = "a layer has two pressures, such as 1000 hPa to 500 hPa".to_string();
            }
            (ParameterKind::Pressure, Type::Layer { .. }) => {
                help = "pick one level, such as 500 hPa".to_string();
            }
            (ParameterKind::Pressure | ParameterKind::PressureOrLayer | ParameterKind::Layer, Type::Number { unit: None, value }) => {
                help = format!("add the unit, such as {} hPa", value.map_or("500".to_string(), format_number));
            }
            (ParameterKind::Latitude | ParameterKind::Longitude, Type::Number { .. }) => {
                help = "write the hemisphere after the number, such as 52.5 north or 20 west".to_string();
            }
            (ParameterKind::LatitudeRange | ParameterKind::LongitudeRange, _) => {
                help = "write a range with `to`, such as 40 north to 65 north".to_string();
            }
            (ParameterKind::HeightOrGeopotential, Type::Field(_)) => {
                help = "give it geopotential_height (m) or geopotential (m2 s-2), such as geopotential_height at 500 hPa".to_string();
            }
            _ => {}
        }
        self.error(
            format!("the {} of `{}` must be {expected}", parameter.name.replace('_', " "), builtin.name),
            argument.span,
            format!("this is {}", kind.describe()),
        )
        .help = Some(help);
        false
    }

    /// Checks the options; returns the chosen words per option name.
    pub(super) fn options(&mut self, builtin: &Builtin, options: &[CallOption], option_kinds: &[Option<Type>]) -> BTreeMap<&'static str, String> {
        let mut chosen = BTreeMap::new();
        let mut seen: BTreeMap<String, Span> = BTreeMap::new();
        for (index, option) in options.iter().enumerate() {
            let evaluated = option_kinds.get(index).cloned().flatten().unwrap_or(Type::Unknown);
            let name = &option.name.name;
            if seen.contains_key(name) {
                self.error(format!("the option `{name}` is given twice"), option.name.span, "given again")
                    .help = Some("give each option once".to_string());
                continue;
            }
            seen.insert(name.clone(), option.name.span);
            let Some(spec) = builtin.option(name) else {
                let valid: Vec<&str> = builtin.options.iter().map(|option| option.name).collect();
                let suggestion = did_you_mean(name, valid.iter().copied());
                let diagnostic = self.error(format!("`{}` has no option `{name}`", builtin.name), option.name.span, "unknown option");
                diagnostic.help = Some(match (suggestion, valid.is_empty()) {
                    (_, true) => format!("`{}` takes no options", builtin.name),
                    (Some(suggestion), false) => format!("did you mean `{suggestion}`?"),
                    (None, false) => format!("its options are {}", list_words(&valid, "and")),
                });
                if !valid.is_empty() {
                    diagnostic.notes.push(builtin.signature());
                }
                continue;
            };
            match spec.kind {
                OptionKind::Words(words) => {
                    let word = match &option.value.kind {
                        ExprKind::Name(word) => Some(word.clone()),
                        _ => None,
                    };
                    match word {
                        Some(word) if words.contains(&word.as_str()) => {
                            chosen.insert(spec.name, word);
                        }
                        _ => {
                            let suggestion = word.as_deref().and_then(|word| did_you_mean(word, words.iter().copied()));
                            let diagnostic = self.error(
                                format!("the option `{name}` of `{}` is one of {}", builtin.name, list_words(words, "or")),
                                option.value.span,
                                "not one of these words",
                            );
                            diagnostic.help = Some(match suggestion {
                                Some(suggestion) => format!("did you mean `{suggestion}`?"),
                                None => spec.documentation.to_string(),
                            });
                        }
                    }
                }
                OptionKind::Angle => {
                    let kind = evaluated.clone();
                    let ok = match &kind {
                        Type::Unknown => true,
                        Type::Number { unit, value } => {
                            let degrees = unit.as_ref().and_then(|unit| {
                                DEGREE.as_ref().and_then(|degree| unit.conversion_to(degree).ok())
                            });
                            match (unit, degrees, value) {
                                (Some(_), Some((factor, _)), Some(value)) => {
                                    let degrees = value * factor;
                                    if !(0.0..=90.0).contains(&degrees) {
                                        self.error(
                                            format!("the option `{name}` must be between 0 and 90 degrees"),
                                            option.value.span,
                                            "out of range",
                                        )
                                        .help = Some("5 to 15 degrees is usual".to_string());
                                    }
                                    true
                                }
                                (Some(_), Some(_), None) => true,
                                (None, _, _) => {
                                    self.error(
                                        format!("the option `{name}` needs the unit degrees"),
                                        option.value.span,
                                        "no unit",
                                    )
                                    .help = Some(format!(
                                        "write {} degrees",
                                        value.map_or("10".to_string(), format_number)
                                    ));
                                    true
                                }
                                _ => false,
                            }
                        }
                        _ => false,
                    };
                    if !ok {
                        self.error(
                            format!("the option `{name}` must be an angle such as 10 degrees"),
                            option.value.span,
                            format!("this is {}", kind.describe()),
                        )
                        .help = Some(spec.documentation.to_string());
                    }
                }
                OptionKind::Length | OptionKind::Speed => {
                    let (reference, example) = match spec.kind {
                        OptionKind::Length => (&METRE, "a length such as 250 km"),
                        _ => (&METRE_PER_SECOND, "a speed such as 2.5 m s-1"),
                    };
                    let kind = evaluated.clone();
                    let ok = match &kind {
                        Type::Unknown => true,
                        Type::Number { unit, .. } => is_dimension(unit, reference),
                        _ => false,
                    };
                    if !ok {
                        self.error(format!("the option `{name}` must be {example}"), option.value.span, format!("this is {}", kind.describe()))
                            .help = Some(spec.documentation.to_string());
                    }
                }
            }
        }
        chosen
    }

    /// Does the current dataset have what the operator needs?
    pub(super) fn requirements(&mut self, builtin: &Builtin, chosen: &BTreeMap<&'static str, String>, span: Span) {
        if builtin.requires.is_empty() {
            return;
        }
        match &self.scope.current {
            None => {
                if !self.reported_no_dataset {
                    self.reported_no_dataset = true;
                    self.error(format!("`{}` needs data, and no dataset is open", builtin.name), span, "needs data")
                        .help = Some("open one first, such as open \"case.nc\"".to_string());
                }
            }
            Some(CurrentDataset::Opaque { .. }) => {}
            Some(CurrentDataset::Known(info)) => {
                let info = info.clone();
                for requirement in builtin.requires {
                    let applies = match requirement.when {
                        When::Always => true,
                        When::OptionAbsent(option) => !chosen.contains_key(option),
                        When::OptionIs(option, word) => chosen.get(option).is_some_and(|chosen| chosen == word),
                    };
                    if applies && !requirement.any_of.iter().any(|role| info.has_role(role)) {
                        let wanted = list_words(requirement.any_of, "or");
                        let route = match requirement.when {
                            When::OptionIs(option, word) => format!(" with {option} {word}"),
                            _ => String::new(),
                        };
                        self.error(
                            format!("`{}`{route} needs {wanted}, which the dataset {} lacks", builtin.name, info.name),
                            span,
                            "cannot be computed from this data",
                        )
                        .help = Some(describe_dataset(&info));
                    }
                }
            }
        }
    }
}

//! Scope and names: definitions (`let`, functions, `open`), blocks, looking
//! names up and saying what exists when one is unknown.

#[allow(unused_imports)]
use std::fmt::Write as _;

use super::*;

impl<'e> Checker<'e> {
    pub(super) fn warn_if_hiding(&mut self, name: &Identifier) {
        if self.environment.builtins.iter().any(|builtin| builtin.name == name.name) {
            self.report(
                Diagnostic::warning(format!("`{}` hides the built-in operator of the same name", name.name), name.span)
                    .with_label("this name")
                    .with_help(format!("choose another name to keep calling `{}(...)`", name.name)),
            );
        }
    }

    pub(super) fn open(&mut self, paths: &[StringLiteral], alias: Option<&Identifier>) {
        let Some(first) = paths.first() else { return };
        let span = first.span.to(paths.last().map_or(first.span, |path| path.span));
        let names: Vec<String> = paths.iter().map(|path| path.value.clone()).collect();
        let display = alias.map_or_else(|| names.join(", "), |alias| alias.name.clone());
        let described = match self.environment.catalog {
            Some(catalog) => match catalog.describe(&names) {
                Ok(mut info) => {
                    info.name = match (alias, info.name.is_empty()) {
                        (Some(alias), false) => format!("{} ({})", alias.name, info.name),
                        (Some(alias), true) => alias.name.clone(),
                        (None, true) => display.clone(),
                        (None, false) => info.name,
                    };
                    CurrentDataset::Known(info)
                }
                Err(message) => {
                    self.error(format!("cannot open {}", list_words(&names, "and")), span, message.clone())
                        .help = Some("check the path; it is read relative to the working folder".to_string());
                    CurrentDataset::Opaque { name: display.clone() }
                }
            },
            None => CurrentDataset::Opaque { name: display.clone() },
        };
        if let Some(alias) = alias {
            if let CurrentDataset::Known(info) = &described {
                self.scope.datasets.insert(alias.name.clone(), info.clone());
            }
            self.scope.bindings.insert(alias.name.clone(), Binding { kind: Type::Dataset(alias.name.clone()), span: alias.span });
        }
        self.scope.current = Some(described);
    }

    pub(super) fn define_function(&mut self, name: &Identifier, parameters: &[Identifier], body: &Expr, span: Span) {
        if !self.locals.is_empty() {
            self.error("functions are defined at the top level", name.span, "inside a block")
                .help = Some("move the function definition out of the block".to_string());
            return;
        }
        let mut seen = BTreeSet::new();
        for parameter in parameters {
            if !seen.insert(parameter.name.as_str()) {
                self.error(format!("the parameter `{}` appears twice", parameter.name), parameter.span, "repeated")
                    .help = Some("give each parameter a different name".to_string());
            }
        }
        self.warn_if_hiding(name);
        // Recursion: follow calls from the body through the functions known.
        if let Some((call_span, path)) = self.find_recursion(&name.name, body) {
            let message = if path.len() == 1 {
                format!("`{}` calls itself", name.name)
            } else {
                format!("`{}` calls itself through {}", name.name, list_words(&path[1..], "and"))
            };
            self.error(message, call_span, "recursive call")
                .help = Some("recursion is not supported; write the steps out, or use a layer operator".to_string());
            // Keep it out of the scope so that calls do not loop.
            return;
        }
        // Check the body once with parameters of unknown kind.
        let frame: BTreeMap<String, Type> = parameters.iter().map(|parameter| (parameter.name.clone(), Type::Unknown)).collect();
        self.locals.push(frame);
        self.expr(body);
        self.locals.pop();
        self.local_functions.insert(name.name.clone());
        self.scope.functions.insert(
            name.name.clone(),
            FunctionDefinition { name: name.name.clone(), parameters: parameters.to_vec(), body: body.clone(), span },
        );
    }

    /// A call in `body` that leads back to `name`: its span and the chain of
    /// functions on the way.
    pub(super) fn find_recursion(&self, name: &str, body: &Expr) -> Option<(Span, Vec<String>)> {
        let mut direct = Vec::new();
        collect_calls(body, &mut direct);
        for (callee, span) in direct {
            if callee == name {
                return Some((span, vec![name.to_string()]));
            }
            // Breadth-first over the known functions' bodies.
            let mut visited = BTreeSet::new();
            let mut queue = vec![(callee.clone(), vec![name.to_string(), callee.clone()])];
            while let Some((current, path)) = queue.pop() {
                if !visited.insert(current.clone()) {
                    continue;
                }
                let Some(definition) = self.scope.functions.get(&current) else { continue };
                let mut calls = Vec::new();
                collect_calls(&definition.body, &mut calls);
                for (next, _) in calls {
                    if next == name {
                        return Some((span, path));
                    }
                    let mut longer = path.clone();
                    longer.push(next.clone());
                    queue.push((next, longer));
                }
            }
        }
        None
    }

    pub(super) fn block(&mut self, statements: &[Statement], span: Span) -> Type {
        self.locals.push(BTreeMap::new());
        let mut last = None;
        for statement in statements {
            last = None;
            match &statement.kind {
                StatementKind::Let { name, value } => {
                    let kind = self.expr(value);
                    if let Some(frame) = self.locals.last_mut() {
                        frame.insert(name.name.clone(), kind);
                    }
                }
                StatementKind::Expression(expr) => last = Some(self.expr(expr)),
                other => {
                    let word = match other {
                        StatementKind::Function { .. } => "function",
                        StatementKind::Open { .. } => "open",
                        StatementKind::Recipe { .. } => "recipe",
                        StatementKind::About { .. } => "about",
                        StatementKind::Parameter { .. } => "parameter",
                        StatementKind::Setting { .. } => "setting",
                        _ => "output",
                    };
                    self.error(format!("`{word}` belongs at the top level, not inside a block"), statement.span, "inside a block")
                        .help = Some("a block holds `let` lines and ends with the expression that gives its value".to_string());
                }
            }
        }
        self.locals.pop();
        match last {
            Some(kind) => kind,
            None => {
                let end = Span::new(span.end.saturating_sub(1), span.end);
                self.error("a block must end with an expression that gives its value", end, "no value before `}`")
                    .help = Some("end the block with an expression, such as { let t = thermal_wind(layer); speed(t) }".to_string());
                Type::Unknown
            }
        }
    }

    pub(super) fn name_exists(&self, name: &str) -> bool {
        self.locals.iter().any(|frame| frame.contains_key(name))
            || self.scope.bindings.contains_key(name)
            || self.scope.functions.contains_key(name)
            || self.environment.builtins.iter().any(|builtin| builtin.name == name)
            || self.known_dataset().is_some_and(|info| info.variable(name).is_some() || info.has_role(name))
    }

    pub(super) fn lookup(&mut self, name: &str, span: Span) -> Type {
        for frame in self.locals.iter().rev() {
            if let Some(kind) = frame.get(name) {
                return kind.clone();
            }
        }
        if let Some(binding) = self.scope.bindings.get(name) {
            return binding.kind.clone();
        }
        if self.scope.functions.contains_key(name) {
            return Type::Function(name.to_string());
        }
        if self.environment.recipes.iter().any(|recipe| recipe.name == name) {
            return Type::Recipe(name.to_string());
        }
        if let Some(info) = self.known_dataset() {
            if let Some(kind) = dataset_name(info, name) {
                return kind;
            }
        }
        if self.environment.builtins.iter().any(|builtin| builtin.name == name) {
            return Type::Function(name.to_string());
        }
        if self.dataset_is_opaque() {
            return Type::Unknown;
        }
        self.unknown_name(name, span);
        Type::Unknown
    }

    pub(super) fn all_names(&self) -> Vec<String> {
        let mut names: Vec<String> = Vec::new();
        for frame in &self.locals {
            names.extend(frame.keys().cloned());
        }
        names.extend(self.scope.bindings.keys().cloned());
        names.extend(self.scope.functions.keys().cloned());
        names.extend(self.environment.recipes.iter().map(|recipe| recipe.name.clone()));
        if let Some(info) = self.known_dataset() {
            names.extend(info.variables.iter().map(|variable| variable.name.clone()));
            names.extend(info.role_names());
        }
        names.extend(self.environment.builtins.iter().map(|builtin| builtin.name.to_string()));
        names
    }

    pub(super) fn unknown_name(&mut self, name: &str, span: Span) {
        let is_role = name == builtins::WIND_ROLE || builtins::ROLES.iter().any(|role| role.name == name);
        let names = self.all_names();
        let suggestion = did_you_mean(name, names.iter().map(String::as_str));
        let exists = self.what_exists();
        if is_role {
            // A role the dataset does not have.
            let message = match &self.scope.current {
                Some(CurrentDataset::Known(info)) => format!("the dataset {} has no {name}", info.name),
                _ => format!("`{name}` needs an open dataset"),
            };
            let note = match &self.scope.current {
                Some(CurrentDataset::Known(info)) => info.missing_notes.iter().find(|(role, _)| role == name).map(|(_, note)| note.clone()),
                _ => None,
            };
            let diagnostic = self.error(message, span, "not in the data");
            diagnostic.help = Some(match note {
                Some(note) => format!("{note}; {exists}"),
                None => exists,
            });
            return;
        }
        if KNOWN_UNIT_WORDS.contains(&name) {
            let diagnostic = self.error(format!("unknown name `{name}`"), span, "a unit, not a name");
            diagnostic.help = Some(
                "a unit is written right after its number, without spaces around `/`: such as 500 hPa or 10 m/s".to_string(),
            );
            return;
        }
        let diagnostic = self.error(format!("unknown name `{name}`"), span, "not defined");
        match suggestion {
            Some(suggestion) => {
                diagnostic.help = Some(format!("did you mean `{suggestion}`?"));
                diagnostic.notes.push(exists);
            }
            None => diagnostic.help = Some(exists),
        }
    }
}

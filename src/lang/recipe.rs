//! Recipes: saved, reusable diagnostics.
//!
//! A recipe is a Baroc file (`.baroc`) with an optional `recipe "title"`
//! and `about "..."` header, declared `parameter`s with defaults and
//! documentation, and the `output`s it produces. It refers to data by role
//! (temperature, geopotential, wind...), never by a path, so it can be
//! shared and run on another case. A library is a folder of recipes: the
//! project's `recipes/` and the user's configuration directory
//! (`$XDG_CONFIG_HOME/baroc/recipes`, or `~/.config/baroc/recipes`).

use std::path::{Path, PathBuf};

use super::diagnostic::Diagnostic;
use super::eval::{Evaluator, RecipeHeader};
use super::syntax::{Span, StatementKind};
use super::value::{Record, Value};

/// The folders searched for recipes, in order: the given project folder,
/// then the user's configuration directory.
pub fn default_folders(project: Option<&Path>) -> Vec<PathBuf> {
    let mut folders = Vec::new();
    if let Some(p) = project {
        folders.push(p.to_path_buf());
    }
    let config = std::env::var_os("XDG_CONFIG_HOME")
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".config")));
    if let Some(c) = config {
        folders.push(c.join("baroc").join("recipes"));
    }
    folders
}

/// The header of a recipe file, read without running it (title, about,
/// parameters with defaults and documentation, outputs).
pub fn read_header(source: &str) -> Result<RecipeHeader, Vec<Diagnostic>> {
    let program = super::parser::parse(source)?;
    let text = |s: Span| source.get(s.start..s.end).unwrap_or("").to_string();
    let mut header = RecipeHeader::default();
    for statement in &program.statements {
        match &statement.kind {
            StatementKind::Recipe { title } => header.title = Some(title.value.clone()),
            StatementKind::About { text: t } => header.about = Some(t.value.clone()),
            StatementKind::Parameter { name, default, documentation } => header.parameters.push(super::eval::ParameterInfo {
                name: name.name.clone(),
                default: text(default.span),
                value: text(default.span),
                documentation: documentation.as_ref().map(|d| d.value.clone()),
            }),
            StatementKind::Output { name, value, documentation } => header.outputs.push(super::eval::OutputInfo {
                name: name.name.clone(),
                expression: text(value.span),
                documentation: documentation.as_ref().map(|d| d.value.clone()),
            }),
            _ => {}
        }
    }
    Ok(header)
}

/// Recipes found in the folders: (call name, path, header).
pub fn library(folders: &[PathBuf]) -> Vec<(String, PathBuf, RecipeHeader)> {
    let mut out = Vec::new();
    for folder in folders {
        let Ok(entries) = std::fs::read_dir(folder) else { continue };
        let mut paths: Vec<PathBuf> = entries.filter_map(|e| e.ok().map(|e| e.path())).filter(|p| p.extension().is_some_and(|e| e == "baroc")).collect();
        paths.sort();
        for path in paths {
            let Ok(source) = std::fs::read_to_string(&path) else { continue };
            let Ok(header) = read_header(&source) else { continue };
            let name = path.file_stem().map(|s| s.to_string_lossy().replace('-', "_")).unwrap_or_default();
            if !out.iter().any(|(n, _, _): &(String, PathBuf, RecipeHeader)| *n == name) {
                out.push((name, path, header));
            }
        }
    }
    out
}

/// A plain-text listing of the library with each recipe's documentation.
pub fn library_listing(folders: &[PathBuf]) -> String {
    let recipes = library(folders);
    if recipes.is_empty() {
        return format!("no recipes found in {}", folders.iter().map(|f| f.display().to_string()).collect::<Vec<_>>().join(", "));
    }
    let mut out = String::new();
    for (name, path, h) in recipes {
        let params: Vec<&str> = h.parameters.iter().map(|p| p.name.as_str()).collect();
        out.push_str(&format!("{name}({})  {}\n", params.join(", "), h.title.clone().unwrap_or_default()));
        if let Some(a) = &h.about {
            out.push_str(&format!("    {a}\n"));
        }
        for p in &h.parameters {
            out.push_str(&format!("    parameter {} = {}  {}\n", p.name, p.default, p.documentation.clone().unwrap_or_default()));
        }
        for o in &h.outputs {
            out.push_str(&format!("    output {}  {}\n", o.name, o.documentation.clone().unwrap_or_default()));
        }
        out.push_str(&format!("    ({})\n", path.display()));
    }
    out
}

/// Saves the session's definitions (bindings, functions, parameters,
/// outputs, in the order made) as a recipe in the first library folder.
/// Data are referred to by role, so `open` statements are not saved.
/// Written atomically. Fails on a bad name or an I/O error.
pub fn save_session(evaluator: &Evaluator, name: &str) -> Result<PathBuf, String> {
    if name.is_empty() || !name.chars().all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_') {
        return Err(format!("`{name}` is not a recipe name: use letters, digits, - and _"));
    }
    let folder = evaluator.recipe_folders.first().cloned().ok_or("no recipe folder is configured")?;
    std::fs::create_dir_all(&folder).map_err(|e| format!("cannot create {}: {e}", folder.display()))?;
    let mut text = String::from("# A Baroc recipe. Data are found by role, so it runs on any case with them.\n");
    if !evaluator.definitions.iter().any(|(n, _)| n == "recipe") {
        text.push_str(&format!("recipe \"{name}\"\n"));
    }
    for (_, source) in &evaluator.definitions {
        text.push_str(source.trim());
        text.push('\n');
    }
    let path = folder.join(format!("{}.baroc", name.replace('_', "-")));
    crate::atomic::write(&path, text.as_bytes()).map_err(|e| format!("cannot write {}: {e}", path.display()))?;
    Ok(path)
}

/// Runs a recipe from the library like a function, its parameters given
/// as options (`budget() with layer (850 hPa to 500 hPa)`); the result is
/// its one output, or a record of all of them.
pub fn call_recipe(
    evaluator: &mut Evaluator,
    path: &Path,
    name: &str,
    arguments: Vec<(Value, Span)>,
    options: Vec<(String, Span, Value, Span)>,
    span: Span,
) -> Result<Value, Diagnostic> {
    let source = std::fs::read_to_string(path).map_err(|e| Diagnostic::error(format!("cannot read the recipe {}: {e}", path.display()), span))?;
    let header = read_header(&source).map_err(|d| Diagnostic::error(format!("the recipe `{name}` does not parse: {}", d.first().map(|d| d.message.clone()).unwrap_or_default()), span))?;
    if let Some((_, s)) = arguments.first() {
        return Err(Diagnostic::error(format!("the recipe `{name}` takes its parameters as options"), *s)
            .with_help(format!("write {name}() with {} ...", header.parameters.first().map_or("parameter", |p| p.name.as_str()))));
    }
    for (option, s, _, _) in &options {
        if !header.parameters.iter().any(|p| p.name == *option) {
            return Err(Diagnostic::error(format!("the recipe `{name}` has no parameter `{option}`"), *s)
                .with_help(format!("its parameters are {}", header.parameters.iter().map(|p| p.name.as_str()).collect::<Vec<_>>().join(", "))));
        }
    }
    let mut sub = Evaluator::new();
    sub.constants = evaluator.constants;
    sub.below_ground = evaluator.below_ground;
    sub.recipe_folders = evaluator.recipe_folders.clone();
    sub.describe = evaluator.describe;
    for (n, d) in evaluator.datasets() {
        sub.attach_dataset(n, d.clone());
    }
    if let Some(d) = evaluator.current_dataset() {
        sub.attach_dataset("data", d.clone());
    }
    for (option, _, v, _) in options {
        sub.overrides.insert(option, v);
    }
    let program = super::parser::parse(&source).map_err(|d| Diagnostic::error(format!("the recipe `{name}` does not parse: {}", d[0].message), span))?;
    sub.run(&program, &source).map_err(|d| {
        Diagnostic::error(format!("the recipe `{name}` failed: {}", d.message), span).with_note(super::render(&d, &source, &super::RenderOptions::default()))
    })?;
    let mut outputs = sub.outputs;
    match outputs.len() {
        0 => Err(Diagnostic::error(format!("the recipe `{name}` declares no outputs"), span)),
        1 => Ok(outputs.remove(0).1),
        _ => Ok(Value::Record(Record { title: header.title.unwrap_or_else(|| name.to_string()), entries: outputs })),
    }
}

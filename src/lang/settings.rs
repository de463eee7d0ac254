//! Settings: choices for a whole program, written like a call's options
//! after the word `setting`:
//!
//! ```text
//! setting below_ground standard_lapse_rate
//! ```
//!
//! `below_ground` says what model-level data give at pressures below their
//! lowest model level (below the ground): `missing` (NaN, the default) or
//! `standard_lapse_rate` (extrapolated at 6.5 K/km, recorded in each
//! field's metadata and in run results). It is carried to the dataset read:
//! datasets opened after it, and those already open (the command line's
//! files, earlier `open`s), are read with that choice. A front end's own
//! choice (the CLI's `--below-ground`) and the program's must agree: when
//! both are given and differ, the program stops with an error at the
//! setting, since neither silently wins.

use super::diagnostic::Diagnostic;
use super::syntax::{CallOption, ExprKind, Program, StatementKind};
use crate::physics::model_levels::BelowLowestLevel;

/// The settings a program may make, with their choices (the first is the
/// default) and one line of documentation.
pub const SETTINGS: &[(&str, &[&str], &str)] =
    &[("below_ground", &["missing", "standard_lapse_rate"], "what model-level data give below their lowest level: missing (NaN) or standard_lapse_rate (extrapolated at 6.5 K/km)")];

/// A setting as read from the program.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Setting {
    BelowGround(BelowLowestLevel),
}

fn list(words: &[&str]) -> String {
    match words {
        [] => String::new(),
        [one] => format!("`{one}`"),
        [init @ .., last] => format!("{} or `{last}`", init.iter().map(|w| format!("`{w}`")).collect::<Vec<_>>().join(", ")),
    }
}

/// Reads one `name value` pair of a `setting` statement. An unknown name
/// or choice is an error at that word, naming what is valid.
pub fn read_setting(option: &CallOption) -> Result<Setting, Diagnostic> {
    let name = option.name.name.as_str();
    let Some((_, choices, _)) = SETTINGS.iter().find(|(n, _, _)| *n == name) else {
        let names: Vec<&str> = SETTINGS.iter().map(|(n, _, _)| *n).collect();
        let mut d = Diagnostic::error(format!("`{name}` is not a setting"), option.name.span).with_label("unknown setting");
        d = match super::did_you_mean(name, names.iter().copied()) {
            Some(near) => d.with_help(format!("did you mean `{near}`? settings: {}", list(&names))),
            None => d.with_help(format!("settings: {}", list(&names))),
        };
        return Err(d);
    };
    let word = match &option.value.kind {
        ExprKind::Name(word) => word.as_str(),
        _ => {
            return Err(Diagnostic::error(format!("`{name}` takes one of the words {}", list(choices)), option.value.span)
                .with_label("not one of the choices")
                .with_help(format!("write, for example, setting {name} {}", choices[choices.len() - 1])))
        }
    };
    match (name, word) {
        ("below_ground", "missing") => Ok(Setting::BelowGround(BelowLowestLevel::Missing)),
        ("below_ground", "standard_lapse_rate") => Ok(Setting::BelowGround(BelowLowestLevel::StandardLapseRate)),
        _ => {
            // As the options of a call say it (`with route ...`).
            let d = Diagnostic::error(format!("the setting `{name}` is one of {}", list(choices)), option.value.span).with_label("not one of these words");
            Err(match super::did_you_mean(word, choices.iter().copied()) {
                Some(near) => d.with_help(format!("did you mean `{near}`?")),
                None => d.with_help(format!("write, for example, setting {name} {}", choices[choices.len() - 1])),
            })
        }
    }
}

/// The word a choice is written with.
pub fn below_ground_word(below: BelowLowestLevel) -> &'static str {
    match below {
        BelowLowestLevel::Missing => "missing",
        BelowLowestLevel::StandardLapseRate => "standard_lapse_rate",
    }
}

/// Checks a program's below-ground setting against the front end's own
/// choice (`front_end`, the CLI's `--below-ground` when given): an error
/// at the setting when both are given and differ.
pub fn agree_with_front_end(option: &CallOption, setting: BelowLowestLevel, front_end: Option<BelowLowestLevel>) -> Result<(), Diagnostic> {
    match front_end {
        Some(chosen) if chosen != setting => Err(Diagnostic::error(
            format!("the program sets below_ground {} but the command line chose --below-ground {}", below_ground_word(setting), below_ground_word(chosen).replace('_', "-")),
            option.value.span,
        )
        .with_label("disagrees with the command line")
        .with_help("give the choice once (drop --below-ground or this setting), or make them agree")),
        _ => Ok(()),
    }
}

/// The below-ground choice a program makes with its top-level settings
/// (the last one wins, as statements run in order), checked against the
/// front end's choice; None when it makes none. For front ends that open
/// the data before running the program (the runner), so it is opened once
/// with the right choice.
pub fn below_ground_of(program: &Program, front_end: Option<BelowLowestLevel>) -> Result<Option<BelowLowestLevel>, Diagnostic> {
    let mut found = None;
    for statement in &program.statements {
        if let StatementKind::Setting { options } = &statement.kind {
            for option in options {
                let Setting::BelowGround(below) = read_setting(option)?;
                agree_with_front_end(option, below, front_end)?;
                found = Some(below);
            }
        }
    }
    Ok(found)
}

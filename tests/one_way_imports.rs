//! The data flow one way (DEVELOPERS.md, "How data flow"): the language and
//! the physics sit below the renderers and the front ends and never reach up
//! to them. This scans the source for paths into the upper modules, so a new
//! upward reach fails here with the file and line that makes it.

use std::path::{Path, PathBuf};

/// Modules above the language: drawing, reports, runs, front ends, the demo.
const UPPER: &[&str] = &["display", "figures", "render", "report", "runner", "kernel", "demo", "session", "mime"];

fn rust_files(folder: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(folder).expect("a source folder") {
        let path = entry.expect("a directory entry").path();
        if path.is_dir() {
            rust_files(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The upper modules a line of source names through the crate root:
/// `crate::render::...`, `baroc::figures`, or inside a grouped
/// `use crate::{grid, display}`. Comments are skipped.
fn upward_reaches(line: &str) -> Vec<&'static str> {
    let code = line.split("//").next().unwrap_or("");
    let mut found = Vec::new();
    for root in ["crate::", "baroc::"] {
        let mut rest = code;
        while let Some(at) = rest.find(root) {
            let after = &rest[at + root.len()..];
            // A group `crate::{a, b::c}`: every first segment inside it.
            let names: Vec<&str> = if let Some(group) = after.strip_prefix('{') {
                let inside = group.split('}').next().unwrap_or("");
                inside.split(',').map(|part| part.trim().split("::").next().unwrap_or("").trim()).collect()
            } else {
                vec![after.split(|c: char| !(c.is_alphanumeric() || c == '_')).next().unwrap_or("")]
            };
            for name in names {
                if let Some(upper) = UPPER.iter().find(|u| **u == name) {
                    found.push(*upper);
                }
            }
            rest = after;
        }
    }
    found
}

#[test]
fn the_scan_sees_each_form_of_path() {
    // The scan must catch what it is for, or the invariant test below
    // could pass while the language reaches up.
    assert_eq!(upward_reaches("use crate::render::FigureSize;"), vec!["render"]);
    assert_eq!(upward_reaches("    let b = crate::display::bundle(&v);"), vec!["display"]);
    assert_eq!(upward_reaches("use crate::{grid::Field, figures};"), vec!["figures"]);
    assert_eq!(upward_reaches("baroc::demo::write_demo(&path)"), vec!["demo"]);
    // Not reaches: the language's own `render` of diagnostics, comments,
    // modules below the language, names that only begin like one.
    assert!(upward_reaches("super::render(&d, &source, &options)").is_empty());
    assert!(upward_reaches("// crate::display is drawn by the front end").is_empty());
    assert!(upward_reaches("use crate::grid::{Field, VectorField};").is_empty());
    assert!(upward_reaches("crate::reports_folder()").is_empty());
}

#[test]
fn the_language_and_the_physics_never_reach_up() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    rust_files(&root.join("src/lang"), &mut files);
    rust_files(&root.join("src/physics"), &mut files);
    files.sort();
    assert!(files.len() > 10, "expected the language and physics sources under src/, found {}", files.len());
    let mut offences = Vec::new();
    for file in &files {
        let text = std::fs::read_to_string(file).expect("a readable source file");
        for (number, line) in text.lines().enumerate() {
            for upper in upward_reaches(line) {
                offences.push(format!("{}:{}: uses `{upper}`: {}", file.strip_prefix(root).unwrap_or(file).display(), number + 1, line.trim()));
            }
        }
    }
    assert!(offences.is_empty(), "the language and the physics must not use the modules above them:\n{}", offences.join("\n"));
}

//! Golden tests of the rendered text of user mistakes.
//!
//! Each `tests/diagnostics/NAME.baroc` is a program with one mistake (or a
//! few related ones); `NAME.expected` beside it is the exact text a user
//! sees. Run with `BLESS=1` to rewrite the `.expected` files after an
//! intended change, then review the diff.

mod support;

use std::path::Path;

use baroc::lang::check::check_source;
use baroc::lang::diagnostic::{render_all, RenderOptions};

fn rendered(name: &str, source: &str) -> String {
    let options = RenderOptions { source_name: Some(name.to_string()), color: false };
    let environment = support::environment();
    match check_source(source, &environment) {
        Err(errors) => render_all(&errors, source, &options),
        Ok((_, report)) => render_all(&report.diagnostics, source, &options),
    }
}

#[test]
fn rendered_diagnostics_match_the_expected_text() {
    let folder = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/diagnostics");
    let bless = std::env::var_os("BLESS").is_some_and(|value| value == "1");
    let mut cases: Vec<_> = std::fs::read_dir(&folder)
        .expect("tests/diagnostics exists")
        .filter_map(|entry| entry.ok().map(|entry| entry.path()))
        .filter(|path| path.extension().is_some_and(|extension| extension == "baroc"))
        .collect();
    cases.sort();
    assert!(cases.len() >= 15, "at least 15 cases, found {}", cases.len());
    let mut failures = Vec::new();
    for path in &cases {
        let name = path.file_name().unwrap().to_string_lossy().to_string();
        let source = std::fs::read_to_string(path).unwrap();
        let actual = rendered(&name, &source);
        // A case must show a mistake: an empty rendering would test nothing.
        assert!(actual.contains("error:") || actual.contains("warning:"), "{name} reports nothing");
        let expected_path = path.with_extension("expected");
        if bless {
            let temporary = expected_path.with_extension("expected.tmp");
            std::fs::write(&temporary, &actual).unwrap();
            std::fs::rename(&temporary, &expected_path).unwrap();
            continue;
        }
        let expected = std::fs::read_to_string(&expected_path).unwrap_or_default();
        if actual != expected {
            failures.push(format!("--- {name}: expected\n{expected}\n--- actual\n{actual}"));
        }
    }
    assert!(failures.is_empty(), "{} of {} cases differ (BLESS=1 rewrites them):\n{}", failures.len(), cases.len(), failures.join("\n"));
}

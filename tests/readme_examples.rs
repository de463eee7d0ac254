//! Every ```baroc block of the README runs, in order, in one session on the
//! demo case (like notebook cells), so the README never drifts from the
//! program; and the error shown in the README is the error Baroc prints.

use baroc::session::Session;

fn readme() -> String {
    std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/README.md")).unwrap()
}

fn blocks(text: &str) -> Vec<String> {
    let mut out = Vec::new();
    let mut current: Option<String> = None;
    for line in text.lines() {
        match (&mut current, line.trim_end()) {
            (None, "```baroc") => current = Some(String::new()),
            (Some(block), "```") => {
                out.push(std::mem::take(block));
                current = None;
            }
            (Some(block), l) => {
                block.push_str(l);
                block.push('\n');
            }
            _ => {}
        }
    }
    out
}

fn session() -> Session {
    let dir = std::env::temp_dir().join(format!("baroc-readme-{}", std::process::id()));
    baroc::demo::write(&dir.join("baroc-demo")).unwrap();
    baroc::demo::regional::write(&dir.join("baroc-demo")).unwrap();
    let mut s = Session::new();
    s.evaluator_mut().base_directory = dir;
    s
}

#[test]
fn every_readme_example_runs_on_the_demo_case() {
    let text = readme();
    let blocks = blocks(&text);
    assert!(blocks.len() >= 8, "found {} examples", blocks.len());
    let mut s = session();
    for block in &blocks {
        if let Err(e) = s.run(block, None) {
            panic!("README example failed:\n{block}\n{}", e.rendered);
        }
    }
}

#[test]
fn the_readme_error_is_the_real_error() {
    let text = readme();
    let start = text.find("    error: cannot add").expect("the README shows an error");
    let shown: String = text[start..].lines().take_while(|l| l.starts_with("    ")).map(|l| format!("{}\n", &l[4..])).collect();
    let code = shown.lines().find_map(|l| l.strip_prefix("1 | ")).expect("the source line").to_string();
    let mut s = session();
    s.run("open \"baroc-demo/marrowind-wave-2026-10-14.nc\"", None).unwrap();
    let err = s.run(&code, None).unwrap_err();
    assert_eq!(err.rendered.trim_end(), shown.trim_end());
}

//! Invariants of the layout: the numerical modules import no IO, async, HTTP or database crate,
//! and every source file opens with a `//!` paragraph saying what it does.

use std::path::{Path, PathBuf};

/// The pure numerical core (see DEVELOPERS.md).
const CORE: [&str; 13] = [
    "allan",
    "fft",
    "spectrum",
    "autocorrelation",
    "equipartition",
    "drag",
    "water",
    "calibration",
    "findings",
    "simulate",
    "recording",
    "linalg",
    "report",
];

/// What the core must not mention.
const FORBIDDEN: [&str; 10] = [
    "tokio", "axum", "sqlx", "reqwest", "hyper", "tower", "std::fs", "std::net", "std::io",
    "std::env",
];

fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for e in entries.flatten() {
        let p = e.path();
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

fn src() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("src")
}

#[test]
fn numerical_modules_import_no_io_async_or_http_crates() {
    let mut checked = 0;
    for module in CORE {
        let mut files = Vec::new();
        let dir = src().join(module);
        if dir.is_dir() {
            rust_files(&dir, &mut files);
        }
        let file = src().join(format!("{module}.rs"));
        if file.is_file() {
            files.push(file);
        }
        assert!(!files.is_empty(), "no source for core module {module}");
        for f in files {
            let text = std::fs::read_to_string(&f).expect("readable");
            for (n, line) in text.lines().enumerate() {
                let code = line.split("//").next().unwrap_or("");
                for word in FORBIDDEN {
                    assert!(
                        !code.contains(word),
                        "{}:{}: the numerical core must not use `{word}`: {line}",
                        f.display(),
                        n + 1
                    );
                }
            }
            checked += 1;
        }
    }
    assert!(checked >= CORE.len());
}

#[test]
fn every_source_file_opens_with_a_module_doc_paragraph() {
    let mut files = Vec::new();
    rust_files(&src(), &mut files);
    let tests = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests");
    rust_files(&tests, &mut files);
    assert!(files.len() > 20);
    for f in files {
        let text = std::fs::read_to_string(&f).expect("readable");
        assert!(
            text.starts_with("//!"),
            "{} does not open with a `//!` paragraph",
            f.display()
        );
    }
}

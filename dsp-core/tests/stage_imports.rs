//! The stage folders of `dsp-core/src` import only what DEVELOPERS.md
//! ("dsp-core: one folder per stage") allows: earlier stages, `num` and
//! `config`. Reads the library sources (code lines before the first
//! `#[cfg(test)]`, comments skipped) and lists every `crate::MODULE` a folder
//! names outside itself. The rule is the project's own layout decision, not
//! an outside reference.
#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// Folder, and the root modules its library code may name.
const ALLOWED: &[(&str, &[&str])] = &[
    // `FrontEnd` feeds the overall stage in the same pass over a block.
    ("frontend", &["num", "overall"]),
    // The velocity path is built from the front end's filter blocks.
    ("overall", &["num", "frontend"]),
    ("speed", &["num"]),
    ("spectrum", &["num"]),
    ("diagnosis", &["num", "config", "spectrum"]),
    ("survey", &["num", "config", "frontend", "diagnosis"]),
];

fn rs_files(dir: &Path, out: &mut Vec<PathBuf>) {
    for e in std::fs::read_dir(dir).expect("read src folder") {
        let p = e.expect("dir entry").path();
        if p.is_dir() {
            rs_files(&p, out);
        } else if p.extension().is_some_and(|x| x == "rs") {
            out.push(p);
        }
    }
}

/// Root modules named as `crate::NAME` in the library code of `file`.
fn named_modules(file: &Path) -> BTreeSet<String> {
    let text = std::fs::read_to_string(file).expect("read source");
    let mut found = BTreeSet::new();
    for line in text.lines() {
        let code = line.trim_start();
        if code.starts_with("#[cfg(test)]") {
            break;
        }
        if code.starts_with("//") {
            continue;
        }
        let code = code.split("//").next().unwrap_or("");
        let mut rest = code;
        while let Some(i) = rest.find("crate::") {
            rest = &rest[i + "crate::".len()..];
            let name: String = rest
                .chars()
                .take_while(|c| c.is_ascii_alphanumeric() || *c == '_')
                .collect();
            found.insert(name);
        }
    }
    found
}

#[test]
fn stages_import_only_earlier_stages_num_and_config() {
    let src = Path::new(env!("CARGO_MANIFEST_DIR")).join("src");
    let mut bad = Vec::new();
    for (folder, allowed) in ALLOWED {
        let mut files = Vec::new();
        rs_files(&src.join(folder), &mut files);
        assert!(!files.is_empty(), "no sources in src/{folder}");
        for f in files {
            for m in named_modules(&f) {
                if m != *folder && !allowed.contains(&m.as_str()) {
                    bad.push(format!("{} names crate::{m}", f.display()));
                }
            }
        }
    }
    assert!(
        bad.is_empty(),
        "stage imports outside DEVELOPERS.md's rule:\n{}",
        bad.join("\n")
    );
}

#[test]
fn the_checker_sees_an_import() {
    // The scan itself: a file that imports a later stage is reported.
    let dir = std::env::temp_dir().join(format!("dsp-core-stage-imports-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let f = dir.join("x.rs");
    std::fs::write(
        &f,
        "//! see crate::pipeline\nuse crate::num::f64_to_f32;\nfn f() { crate::diagnosis::x(); } // crate::report\n#[cfg(test)]\nuse crate::report;\n",
    )
    .unwrap();
    let got = named_modules(&f);
    std::fs::remove_dir_all(&dir).unwrap();
    let want: BTreeSet<String> = ["num", "diagnosis"].iter().map(|s| s.to_string()).collect();
    assert_eq!(got, want);
}

//! `envord point check` (issue 15): every watched line a point cannot
//! search is listed with the reason and the setting that would, the exit
//! code is 1 when there is one, and `analyze` prints the same cautions.
//! The limits checked are the project's own (`dsp_core::diagnosis::coverage`:
//! 16 bins per shaft order, search to S/4; the mesh sideband at 4 bins from
//! its line).
#![allow(clippy::unwrap_used, clippy::expect_used, clippy::panic)]

use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_envord");

/// A two-shaft point: the input and a very slow output (1/400, e.g. a
/// kiln drive): no samples_per_rev >= 8 gives its shaft 16 bins per order
/// within 65,535 revolutions, so its bearing cannot be searched. The mesh's
/// sidebands at the output's order (0.0025 orders) cannot be resolved either.
const SLOW: &str = r#"
[speed]
min_rpm = 1200.0
max_rpm = 1800.0

[spectrum]
samples_per_rev = 64
revolutions = 256

[[shaft]]
name = "input"

[[shaft]]
name = "output"
ratio = 0.0025

[[bearing]]
name = "in-de"
shaft = "input"
bpfo_x = 3.5848
bpfi_x = 5.4152
ftf_x = 0.39828
bsf_x = 2.35675

[[bearing]]
name = "out-de"
shaft = "output"
bpfo_x = 3.5848
bpfi_x = 5.4152
ftf_x = 0.39828
bsf_x = 2.35675

[[mesh]]
name = "final"
shaft = "input"
teeth = 11
mate_shaft = "output"
"#;

fn check(text: &str) -> (i32, String, String) {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("p.toml");
    std::fs::write(&p, text).unwrap();
    let out = Command::new(BIN)
        .args(["point", "check"])
        .arg(&p)
        .args(["--rpm", "1500"])
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into_owned(),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

#[test]
fn an_unsearchable_slow_shaft_line_is_listed_with_the_fix_and_fails_the_check() {
    let (code, out, err) = check(SLOW);
    assert_eq!(code, 1, "stdout: {out}\nstderr: {err}");
    for kind in ["BPFO", "BPFI", "FTF", "BSF"] {
        assert!(
            out.contains(&format!(
                "bearing out-de {kind}: not searched: shaft too slow"
            )),
            "{kind}: {out}"
        );
    }
    assert!(!out.contains("bearing in-de"), "{out}");
    assert!(out.contains("put the tach on a slower shaft"), "{out}");
    assert!(
        out.contains("mesh final sidebands at the mate shaft output"),
        "{out}"
    );
    assert!(err.contains("cannot be searched"), "{err}");
}

#[test]
fn a_point_whose_lines_are_all_searched_passes() {
    // The same point without the slow shaft's bearing and mesh mate.
    let ok = SLOW
        .split("[[bearing]]\nname = \"out-de\"")
        .next()
        .unwrap()
        .to_string()
        + "[[mesh]]\nname = \"final\"\nshaft = \"input\"\nteeth = 11\n";
    let (code, out, err) = check(&ok);
    assert_eq!(code, 0, "stdout: {out}\nstderr: {err}");
    assert!(out.contains("every watched line is searched"), "{out}");
    assert!(out.contains("1 pass(es)"), "{out}");
}

#[test]
fn a_mesh_above_the_search_range_names_the_samples_per_rev_that_reaches_it() {
    let text = SLOW.replace("teeth = 11", "teeth = 23");
    let (code, out, _) = check(&text);
    assert_eq!(code, 1);
    assert!(
        out.contains("mesh final (order 23.000): not searched: above the search range 16.0")
            && out.contains("samples_per_rev = 128 would reach it"),
        "{out}"
    );
}

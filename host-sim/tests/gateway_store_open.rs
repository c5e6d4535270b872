//! How gateway commands open the SQLite store: read-only commands never
//! create or change a store and work on one the user can only read; a
//! corrupt store is named with a way to recover; imports started together on
//! a new store all succeed.
#![allow(
    clippy::panic,
    clippy::unwrap_used,
    clippy::expect_used,
    clippy::indexing_slicing,
    clippy::cast_possible_truncation
)]

#[path = "gateway_common/mod.rs"]
mod common;

use common::*;
use std::os::unix::fs::PermissionsExt;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

fn write_lines(path: &Path, frames: &[Vec<u8>]) {
    let text: Vec<String> = frames.iter().map(|f| hex(f)).collect();
    std::fs::write(path, text.join("\n") + "\n").unwrap();
}

fn stderr(o: &std::process::Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}

/// The names in a folder, sorted.
fn listing(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

#[test]
fn read_only_commands_never_create_a_store() {
    let dir = tempfile::tempdir().unwrap();
    for args in [
        vec!["gateway", "status", "--db", "gw-typo.sqlite"],
        vec![
            "gateway",
            "trend",
            "--db",
            "gw-typo.sqlite",
            "--node",
            "1",
            "--bearing",
            "0",
        ],
        vec![
            "gateway",
            "baseline",
            "--db",
            "gw-typo.sqlite",
            "--node",
            "1",
            "--bearing",
            "0",
            "--defect",
            "bpfo",
            "--score-db",
            "5",
        ],
    ] {
        let o = run(&args, dir.path());
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
        let e = stderr(&o);
        assert!(e.contains("gw-typo.sqlite"), "{args:?}: {e}");
        assert!(e.contains("no such store"), "{args:?}: {e}");
        assert!(
            listing(dir.path()).is_empty(),
            "{args:?} created {:?}",
            listing(dir.path())
        );
    }
}

/// Runs the binary as the unprivileged user `nobody` when the tests run as
/// root (where file permissions do not bite), else as the current user.
/// The binary is copied into `dir` so that `nobody` can run it whatever the
/// permissions of the build folder.
fn run_unprivileged(args: &[&str], dir: &Path) -> std::process::Output {
    let is_root = Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false);
    if !is_root {
        return run(args, dir);
    }
    let bin = dir.join("envord-copy");
    if !bin.exists() {
        std::fs::copy(BIN, &bin).unwrap();
        std::fs::set_permissions(&bin, std::fs::Permissions::from_mode(0o755)).unwrap();
    }
    // setpriv is in util-linux (every Debian/Ubuntu); without it the test
    // cannot drop root and fails rather than pass without checking.
    // The copy may be "text file busy" for a moment: a process spawned by
    // another test thread can hold the written file open until its exec.
    let mut tries = 0;
    loop {
        let o = Command::new("setpriv")
            .args(["--reuid=65534", "--regid=65534", "--clear-groups", "--"])
            .arg(&bin)
            .args(args)
            .current_dir(dir)
            .output()
            .expect("setpriv (util-linux) is needed to run this test as a non-root user");
        tries += 1;
        if tries < 100 && String::from_utf8_lossy(&o.stderr).contains("Text file busy") {
            std::thread::sleep(Duration::from_millis(20));
            continue;
        }
        return o;
    }
}

#[test]
fn read_only_commands_work_on_a_store_the_user_can_only_read() {
    let top = tempfile::tempdir().unwrap();
    std::fs::set_permissions(top.path(), std::fs::Permissions::from_mode(0o755)).unwrap();
    let ro = top.path().join("ro");
    std::fs::create_dir(&ro).unwrap();
    let frames: Vec<Vec<u8>> = (0..8u16).map(|s| frame(2, s, 5.0, false)).collect();
    write_lines(&ro.join("in.txt"), &frames);
    let o = run(&["gateway", "import", "--db", "gw.sqlite", "in.txt"], &ro);
    assert!(o.status.success(), "{}", stderr(&o));
    std::fs::remove_file(ro.join("in.txt")).unwrap();
    // A cleanly closed WAL store leaves no -wal/-shm files.
    assert_eq!(listing(&ro), ["gw.sqlite"]);
    let db = ro.join("gw.sqlite");
    let before = std::fs::read(&db).unwrap();
    let mtime = std::fs::metadata(&db).unwrap().modified().unwrap();
    std::fs::set_permissions(&db, std::fs::Permissions::from_mode(0o444)).unwrap();
    std::fs::set_permissions(&ro, std::fs::Permissions::from_mode(0o555)).unwrap();

    let o = run_unprivileged(&["gateway", "status", "--db", "ro/gw.sqlite"], top.path());
    assert!(o.status.success(), "status: {}", stderr(&o));
    assert!(stdout(&o).contains("links"), "{}", stdout(&o));
    let o = run_unprivileged(
        &[
            "gateway",
            "trend",
            "--db",
            "ro/gw.sqlite",
            "--node",
            "2",
            "--bearing",
            "0",
        ],
        top.path(),
    );
    assert!(o.status.success(), "trend: {}", stderr(&o));
    assert_eq!(stdout(&o).lines().count(), 1 + 8 * 4, "{}", stdout(&o));
    // The same as root: opening read-only never changes the file nor leaves
    // -wal/-shm files beside it (as root the folder permissions do not stop
    // a writer, so this checks the open mode itself).
    let o = run(&["gateway", "status", "--db", "ro/gw.sqlite"], top.path());
    assert!(o.status.success(), "status as owner: {}", stderr(&o));
    assert_eq!(listing(&ro), ["gw.sqlite"]);
    assert_eq!(std::fs::read(&db).unwrap(), before, "store changed");
    assert_eq!(std::fs::metadata(&db).unwrap().modified().unwrap(), mtime);
    std::fs::set_permissions(&ro, std::fs::Permissions::from_mode(0o755)).unwrap();
}

#[test]
fn read_only_open_leaves_an_older_store_unchanged_and_says_how_to_upgrade() {
    let dir = tempfile::tempdir().unwrap();
    let db = dir.path().join("old.sqlite");
    let c = rusqlite::Connection::open(&db).unwrap();
    c.execute_batch(host_sim::gateway::store::MIGRATIONS[0])
        .unwrap();
    c.pragma_update(None, "user_version", 1).unwrap();
    drop(c);
    let before = std::fs::read(&db).unwrap();
    let o = run(&["gateway", "status", "--db", "old.sqlite"], dir.path());
    assert_eq!(o.status.code(), Some(2), "{}", stderr(&o));
    let e = stderr(&o);
    assert!(
        e.contains("old.sqlite") && e.contains("gateway import"),
        "{e}"
    );
    assert_eq!(std::fs::read(&db).unwrap(), before);
}

#[test]
fn a_corrupt_store_is_named_with_a_way_to_recover() {
    let dir = tempfile::tempdir().unwrap();
    std::fs::write(dir.path().join("junk.sqlite"), vec![0x5au8; 8192]).unwrap();
    for args in [
        vec!["gateway", "status", "--db", "junk.sqlite"],
        vec!["gateway", "import", "--db", "junk.sqlite", "-"],
    ] {
        let o = Command::new(BIN)
            .args(&args)
            .current_dir(dir.path())
            .stdin(Stdio::null())
            .output()
            .unwrap();
        assert_eq!(o.status.code(), Some(2), "{args:?}: {}", stderr(&o));
        let e = stderr(&o);
        assert!(e.contains("junk.sqlite"), "{e}");
        assert!(e.contains("backup") && e.contains("re-import"), "{e}");
    }
    assert_eq!(
        std::fs::read(dir.path().join("junk.sqlite")).unwrap(),
        vec![0x5au8; 8192]
    );
}

#[test]
fn imports_started_together_on_a_new_store_all_succeed() {
    // 6 rounds of 3 processes on a fresh store each: the race on the first
    // migration shows within a few rounds without the write lock.
    for round in 0..6u16 {
        let dir = tempfile::tempdir().unwrap();
        for p in 0..3u16 {
            let frames: Vec<Vec<u8>> = (0..20u16)
                .map(|s| frame(10 + p, s + round, 5.0, false))
                .collect();
            write_lines(&dir.path().join(format!("in{p}.txt")), &frames);
        }
        let children: Vec<_> = (0..3)
            .map(|p| {
                Command::new(BIN)
                    .args(["gateway", "import", "--db", "gw.sqlite"])
                    .arg(format!("in{p}.txt"))
                    .current_dir(dir.path())
                    .stdout(Stdio::null())
                    .stderr(Stdio::piped())
                    .spawn()
                    .unwrap()
            })
            .collect();
        let t0 = Instant::now();
        for mut c in children {
            loop {
                if let Some(st) = c.try_wait().unwrap() {
                    let mut e = String::new();
                    use std::io::Read;
                    c.stderr.take().unwrap().read_to_string(&mut e).unwrap();
                    assert!(st.success(), "round {round}: {st}: {e}");
                    break;
                }
                if t0.elapsed() > Duration::from_secs(60) {
                    c.kill().unwrap();
                    panic!("round {round}: import did not finish in 60 s");
                }
                std::thread::sleep(Duration::from_millis(5));
            }
        }
        let db = dir.path().join("gw.sqlite");
        assert_eq!(db_count(&db, "reports"), 60, "round {round}");
    }
}

#[test]
fn read_only_commands_see_rows_still_in_the_write_ahead_log() {
    let dir = tempfile::tempdir().unwrap();
    write_lines(
        &dir.path().join("a.txt"),
        &(0..3u16)
            .map(|s| frame(5, s, 5.0, false))
            .collect::<Vec<_>>(),
    );
    write_lines(
        &dir.path().join("b.txt"),
        &(3..7u16)
            .map(|s| frame(5, s, 5.0, false))
            .collect::<Vec<_>>(),
    );
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "a.txt"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    // A connection held open (as a running gateway service would) keeps the
    // -wal file; the second import's rows stay in it, not yet checkpointed.
    let holder = rusqlite::Connection::open(dir.path().join("gw.sqlite")).unwrap();
    let _: i64 = holder
        .query_row("SELECT COUNT(*) FROM reports", [], |r| r.get(0))
        .unwrap();
    let o = run(
        &["gateway", "import", "--db", "gw.sqlite", "b.txt"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    assert!(dir.path().join("gw.sqlite-wal").exists());
    let o = run(
        &["gateway", "status", "--db", "gw.sqlite", "--json"],
        dir.path(),
    );
    assert!(o.status.success(), "{}", stderr(&o));
    let v: serde_json::Value = serde_json::from_str(stdout(&o).trim()).unwrap();
    assert_eq!(v["links"][0]["frames"], 7, "{v}");
    drop(holder);
}

//! The one rule for every file a command writes (reports, summaries, plots,
//! WAVs, CSVs, downlinks, keys, identity records): an existing file is never
//! replaced unless `--force` is given, and a file appears whole or not at
//! all.
//!
//! Each file is written to a temporary file beside it (same folder, so the
//! same file system), then put in place: without `--force`
//! by a hard link, which fails if the name exists (atomic, so a file that
//! appears meanwhile is not replaced either), with `--force` by a rename
//! over it. A reader never sees half a file; a failed or interrupted write
//! leaves the old file as it was.

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};

use crate::error::CliError;

/// Set once by `main` from the global `--force` option.
static FORCE: AtomicBool = AtomicBool::new(false);
/// Makes temporary names unique within the process (threads of `batch`).
static TMP_COUNTER: AtomicU32 = AtomicU32::new(0);

/// Allows (true) replacing existing output files, as `--force` does.
pub fn set_force(on: bool) {
    FORCE.store(on, Ordering::Relaxed);
}

/// Whether existing output files may be replaced.
pub fn force() -> bool {
    FORCE.load(Ordering::Relaxed)
}

/// Who may read a new file.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Access {
    /// As any new file (mode 0666 less the umask).
    Shared,
    /// Its owner only (mode 0600, set when the file is created): keys and
    /// identity records.
    OwnerOnly,
}

fn exists_err(path: &Path) -> CliError {
    CliError::input(
        path.display(),
        "already exists; use --force to replace it (or choose another output path)",
    )
}

fn io_err(path: &Path, e: &std::io::Error) -> CliError {
    CliError::Other(format!("{}: cannot write: {e}", path.display()))
}

/// Refuses early, before any long work, an output path that exists (unless
/// `--force`). The write itself checks again.
pub fn check_free(path: &Path) -> Result<(), CliError> {
    if !force() && std::fs::symlink_metadata(path).is_ok() {
        return Err(exists_err(path));
    }
    Ok(())
}

/// Writes `bytes` to `path` under the rule (shared read access).
pub fn write(path: &Path, bytes: &[u8]) -> Result<(), CliError> {
    write_as(path, bytes, Access::Shared)
}

/// Writes `bytes` to `path` under the rule with the given access.
pub fn write_as(path: &Path, bytes: &[u8], access: Access) -> Result<(), CliError> {
    check_free(path)?;
    let tmp = Temp::create(path, access)?;
    // Keys and identities are flushed to disk before they are put in place
    // (a power cut must not leave an empty key); other outputs can be
    // written again and are not, which keeps `batch` fast.
    tmp.fill(bytes, access == Access::OwnerOnly)?;
    tmp.commit(path)
}

/// Lets `render` write the file at a temporary path (which ends with the
/// same file name, so its extension still picks the format), then puts it in
/// place under the rule. For writers that take a path (plots).
pub fn write_with(
    path: &Path,
    render: impl FnOnce(&Path) -> Result<(), CliError>,
) -> Result<(), CliError> {
    check_free(path)?;
    let tmp = Temp::create(path, Access::Shared)?;
    render(&tmp.path)?;
    tmp.commit(path)
}

/// A temporary file beside its target, removed unless committed.
struct Temp {
    path: PathBuf,
    done: bool,
}

impl Temp {
    fn create(target: &Path, access: Access) -> Result<Self, CliError> {
        let name = target
            .file_name()
            .ok_or_else(|| CliError::input(target.display(), "not a file name"))?;
        let dir = target
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or(Path::new("."));
        let n = TMP_COUNTER.fetch_add(1, Ordering::Relaxed);
        let mut tmp_name = std::ffi::OsString::from(format!(".envord-{}-{n}-", std::process::id()));
        tmp_name.push(name);
        let path = dir.join(tmp_name);
        let mut o = std::fs::OpenOptions::new();
        o.write(true).create_new(true);
        #[cfg(unix)]
        {
            use std::os::unix::fs::OpenOptionsExt;
            o.mode(match access {
                Access::Shared => 0o666,
                Access::OwnerOnly => 0o600,
            });
        }
        #[cfg(not(unix))]
        let _ = access;
        o.open(&path).map_err(|e| io_err(target, &e))?;
        Ok(Self { path, done: false })
    }

    fn fill(&self, bytes: &[u8], sync: bool) -> Result<(), CliError> {
        let mut f = std::fs::OpenOptions::new()
            .write(true)
            .truncate(true)
            .open(&self.path)
            .map_err(|e| io_err(&self.path, &e))?;
        f.write_all(bytes).map_err(|e| io_err(&self.path, &e))?;
        if sync {
            f.sync_all().map_err(|e| io_err(&self.path, &e))?;
        }
        Ok(())
    }

    fn commit(mut self, target: &Path) -> Result<(), CliError> {
        let r = if force() {
            std::fs::rename(&self.path, target).map_err(|e| io_err(target, &e))
        } else {
            match std::fs::hard_link(&self.path, target) {
                Ok(()) => Ok(()),
                Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => Err(exists_err(target)),
                // A file system without hard links: check, then rename (the
                // name could appear in between; nothing better is portable).
                Err(_) if std::fs::symlink_metadata(target).is_ok() => Err(exists_err(target)),
                Err(_) => std::fs::rename(&self.path, target).map_err(|e| io_err(target, &e)),
            }
        };
        if r.is_ok() {
            self.done = !self.path.exists();
        }
        r
    }
}

impl Drop for Temp {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_file(&self.path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn refuses_an_existing_file_and_leaves_no_temporary() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("a.txt");
        write(&p, b"one").unwrap();
        let e = write(&p, b"two").unwrap_err();
        assert_eq!(e.exit_code(), 2);
        assert!(e.to_string().contains("use --force to replace it"), "{e}");
        assert_eq!(std::fs::read(&p).unwrap(), b"one");
        // the atomic check at commit time, past the early check
        let tmp = Temp::create(&p, Access::Shared).unwrap();
        tmp.fill(b"three", false).unwrap();
        assert_eq!(tmp.commit(&p).unwrap_err().exit_code(), 2);
        assert_eq!(std::fs::read(&p).unwrap(), b"one");
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn a_failed_render_leaves_nothing() {
        let dir = tempfile::tempdir().unwrap();
        let p = dir.path().join("plot.svg");
        let r = write_with(&p, |_| Err(CliError::Other("boom".into())));
        assert!(r.is_err());
        assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

//! Where a run's folders go and how they get there without touching anything else.
//!
//! - A run folder is `<output root>/<name>/<label>`, a part folder
//!   `<output root>/<name>/<label>.shards/part-...`. The name and the label are single plain
//!   path components (`config::check_folder_name`, checked before anything touches the disk);
//!   the folder's parent is created and then proven, once symbolic links are resolved, to lie
//!   inside the output root.
//! - One writer per folder: a lock file `.<folder>.lock` beside it, created only if absent, holds
//!   the writer's process id and host. A second run into the same folder is refused, naming the
//!   holder; a lock left by a process of this host that is gone is taken over and reported.
//! - A folder is built in a work folder `.<folder>.partial-<pid>` beside it and swapped in whole
//!   ([`Target::commit`]): an existing folder is first renamed aside to `.<folder>.old-<pid>`,
//!   the new one renamed in, the old one removed last. A work folder is removed when its run
//!   fails. Work and aside folders left by processes that are gone (a kill, a power cut) are
//!   cleaned by the next run into the same folder, and reported; an aside folder whose run was
//!   killed between the two renames is put back first, so a good earlier run is never lost.

use crate::config::check_folder_name;
use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

fn io(path: &Path, e: impl std::fmt::Display) -> Error {
    Error::Write { path: path.to_path_buf(), message: e.to_string() }
}

/// This machine's host name (for the lock file), or `unknown`.
fn host() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname")
        .map(|h| h.trim().to_string())
        .unwrap_or_else(|_| "unknown".into())
}

/// Whether process `pid` of this host is running (Linux: `/proc/<pid>` exists). Elsewhere the
/// answer is "yes", so a lock is never taken from a process that might be alive.
fn alive(pid: u32) -> bool {
    if pid == std::process::id() {
        return true;
    }
    if Path::new("/proc/self").exists() {
        Path::new(&format!("/proc/{pid}")).exists()
    } else {
        true
    }
}

/// The file name of `dir` (its last component).
fn leaf(dir: &Path) -> String {
    dir.file_name().map(|n| n.to_string_lossy().to_string()).unwrap_or_default()
}

/// `<parent>/.<leaf>.<kind>-<pid>`.
fn sibling(dir: &Path, kind: &str, pid: u32) -> PathBuf {
    dir.with_file_name(format!(".{}.{kind}-{pid}", leaf(dir)))
}

/// Checks a run label (from `source`: `--label`, `report.label` or the default).
pub fn check_label(label: &str, source: &str) -> Result<()> {
    check_folder_name(label).map_err(|m| Error::Usage(format!("{source}: {m}")))
}

/// The run folder `<root>/<name>/<label>`, after checking both components; creates
/// `<root>/<name>` and proves it lies inside `root` once links are resolved.
pub fn run_dir(root: &Path, name: &str, label: &str, label_source: &str) -> Result<PathBuf> {
    check_folder_name(name).map_err(|m| Error::Usage(format!("pipeline name: {m}")))?;
    check_label(label, label_source)?;
    let parent = root.join(name);
    std::fs::create_dir_all(&parent).map_err(|e| io(&parent, e))?;
    let (real_root, real_parent) =
        (root.canonicalize().map_err(|e| io(root, e))?, parent.canonicalize().map_err(|e| io(&parent, e))?);
    if !real_parent.starts_with(&real_root) || real_parent == real_root {
        return Err(Error::Usage(format!(
            "{} resolves to {}, outside the output root {}; refusing to write there",
            parent.display(),
            real_parent.display(),
            real_root.display()
        )));
    }
    Ok(parent.join(label))
}

/// A folder being written: the lock on it and its work folder. Dropped without
/// [`Target::commit`], it removes the work folder and releases the lock.
#[derive(Debug)]
pub struct Target {
    dir: PathBuf,
    work: PathBuf,
    lock: PathBuf,
    committed: bool,
    /// What cleaning before the run found and did (also logged as warnings).
    pub cleaned: Vec<String>,
}

impl Target {
    /// Takes the lock on `dir` (refused while another live process holds it), cleans what dead
    /// processes left beside it, and makes a fresh work folder.
    pub fn open(dir: &Path) -> Result<Target> {
        let parent = dir.parent().unwrap_or(Path::new(".")).to_path_buf();
        std::fs::create_dir_all(&parent).map_err(|e| io(&parent, e))?;
        let lock = dir.with_file_name(format!(".{}.lock", leaf(dir)));
        let mut cleaned = Vec::new();
        take_lock(&lock, &mut cleaned)?;
        let work = sibling(dir, "partial", std::process::id());
        let mut target = Target { dir: dir.to_path_buf(), work: work.clone(), lock, committed: false, cleaned };
        target.clean_leftovers()?;
        if work.exists() {
            std::fs::remove_dir_all(&work).map_err(|e| io(&work, e))?;
        }
        std::fs::create_dir_all(&work).map_err(|e| io(&work, e))?;
        for c in &target.cleaned {
            tracing::warn!("{c}");
        }
        Ok(target)
    }

    /// The work folder the files are written into.
    pub fn work(&self) -> &Path {
        &self.work
    }

    /// The folder's final place.
    pub fn dir(&self) -> &Path {
        &self.dir
    }

    /// Work and aside folders of processes that are gone: an aside folder (an earlier good run)
    /// goes back in place when the folder is missing, anything else is removed.
    fn clean_leftovers(&mut self) -> Result<()> {
        let parent = self.dir.parent().unwrap_or(Path::new(".")).to_path_buf();
        let prefix = format!(".{}.", leaf(&self.dir));
        let Ok(entries) = std::fs::read_dir(&parent) else { return Ok(()) };
        let mut found: Vec<(String, u32, PathBuf)> = Vec::new();
        for e in entries.flatten() {
            let name = e.file_name().to_string_lossy().to_string();
            let Some(rest) = name.strip_prefix(&prefix) else { continue };
            let Some((kind, pid)) = rest.rsplit_once('-') else { continue };
            let Ok(pid) = pid.parse::<u32>() else { continue };
            if (kind == "partial" || kind == "old") && !alive(pid) {
                found.push((kind.to_string(), pid, e.path()));
            }
        }
        found.sort();
        for (kind, pid, path) in found {
            if kind == "old" && !self.dir.exists() {
                std::fs::rename(&path, &self.dir).map_err(|e| io(&self.dir, e))?;
                self.cleaned.push(format!(
                    "put back {} (an earlier run that process {pid}, now gone, had set aside) as {}",
                    path.display(),
                    self.dir.display()
                ));
            } else {
                std::fs::remove_dir_all(&path).map_err(|e| io(&path, e))?;
                self.cleaned.push(format!("removed {} left by process {pid}, which is gone", path.display()));
            }
        }
        Ok(())
    }

    /// Swaps the finished work folder in: the existing folder aside, the new one in, the old
    /// one removed last.
    pub fn commit(mut self) -> Result<PathBuf> {
        if std::fs::symlink_metadata(&self.dir).is_ok() {
            let old = sibling(&self.dir, "old", std::process::id());
            std::fs::rename(&self.dir, &old).map_err(|e| io(&self.dir, e))?;
            if let Err(e) = std::fs::rename(&self.work, &self.dir) {
                let _ = std::fs::rename(&old, &self.dir);
                return Err(io(&self.dir, e));
            }
            self.committed = true;
            if let Err(e) = std::fs::remove_dir_all(&old) {
                tracing::warn!("could not remove the replaced folder {}: {e}", old.display());
            }
        } else {
            std::fs::rename(&self.work, &self.dir).map_err(|e| io(&self.dir, e))?;
            self.committed = true;
        }
        Ok(self.dir.clone())
    }
}

impl Drop for Target {
    fn drop(&mut self) {
        if !self.committed {
            let _ = std::fs::remove_dir_all(&self.work);
        }
        let _ = std::fs::remove_file(&self.lock);
    }
}

/// Creates the lock file, or takes over one whose process of this host is gone.
fn take_lock(lock: &Path, cleaned: &mut Vec<String>) -> Result<()> {
    use std::io::Write as _;
    let me = format!("pid {}\nhost {}\n", std::process::id(), host());
    for _ in 0..2 {
        match std::fs::OpenOptions::new().write(true).create_new(true).open(lock) {
            Ok(mut f) => return f.write_all(me.as_bytes()).map_err(|e| io(lock, e)),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {
                let text = std::fs::read_to_string(lock).unwrap_or_default();
                let field =
                    |k: &str| text.lines().find_map(|l| l.strip_prefix(k)).map(str::trim).unwrap_or("").to_string();
                let (pid, holder_host) = (field("pid "), field("host "));
                let gone = holder_host == host() && pid.parse::<u32>().is_ok_and(|p| !alive(p));
                if !gone {
                    return Err(Error::Write {
                        path: lock.to_path_buf(),
                        message: format!(
                            "another run is writing this folder (process {pid} on host {holder_host}); wait for it to finish, or remove this lock file if that process is gone"
                        ),
                    });
                }
                std::fs::remove_file(lock).map_err(|e| io(lock, e))?;
                cleaned.push(format!("took over the lock {} of process {pid}, which is gone", lock.display()));
            }
            Err(e) => return Err(io(lock, e)),
        }
    }
    Err(Error::Write { path: lock.to_path_buf(), message: "the lock file could not be taken".into() })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A process id that is not running here (the highest pid Linux hands out is below it).
    const DEAD: u32 = 4_194_304 + 17;

    #[test]
    fn names_that_climb_or_hide_are_refused_before_any_folder_is_made() {
        let root = tempfile::tempdir().unwrap();
        for bad in ["..", ".", "", "../x", "/abs", "a/b", ".hidden", "x y"] {
            assert!(run_dir(root.path(), "demo", bad, "--label").is_err(), "{bad:?}");
            assert!(run_dir(root.path(), bad, "ok", "--label").is_err(), "{bad:?}");
        }
        assert_eq!(std::fs::read_dir(root.path()).unwrap().count(), 0, "nothing was created");
        assert_eq!(
            run_dir(root.path(), "demo", "asof-2019-12-31", "--label").unwrap(),
            root.path().join("demo/asof-2019-12-31")
        );
    }

    #[test]
    fn a_name_linked_outside_the_root_is_refused() {
        let (root, elsewhere) = (tempfile::tempdir().unwrap(), tempfile::tempdir().unwrap());
        std::os::unix::fs::symlink(elsewhere.path(), root.path().join("demo")).unwrap();
        let e = run_dir(root.path(), "demo", "r", "--label").unwrap_err().to_string();
        assert!(e.contains("outside the output root"), "{e}");
    }

    #[test]
    fn a_commit_replaces_the_old_folder_whole_and_a_failure_leaves_it() {
        let root = tempfile::tempdir().unwrap();
        let dir = root.path().join("r");
        std::fs::create_dir_all(dir.join("tables")).unwrap();
        std::fs::write(dir.join("report.md"), "old").unwrap();
        // A run that fails: its work folder goes, the old run stays as it was.
        {
            let t = Target::open(&dir).unwrap();
            std::fs::write(t.work().join("report.md"), "half").unwrap();
        }
        assert_eq!(std::fs::read_to_string(dir.join("report.md")).unwrap(), "old");
        // A run that finishes replaces it whole.
        let t = Target::open(&dir).unwrap();
        std::fs::write(t.work().join("report.md"), "new").unwrap();
        t.commit().unwrap();
        assert_eq!(std::fs::read_to_string(dir.join("report.md")).unwrap(), "new");
        assert!(!dir.join("tables").exists(), "nothing of the old folder is mixed in");
        let names: Vec<String> = std::fs::read_dir(root.path())
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().to_string())
            .collect();
        assert_eq!(names, ["r"], "no lock, work or aside folder is left");
    }

    #[test]
    fn a_live_holder_keeps_the_lock_and_a_dead_ones_leftovers_are_cleaned() {
        let root = tempfile::tempdir().unwrap();
        let dir = root.path().join("r");
        let held = Target::open(&dir).unwrap();
        let e = Target::open(&dir).unwrap_err().to_string();
        assert!(e.contains(&format!("process {}", std::process::id())) && e.contains(".r.lock"), "{e}");
        drop(held);
        // A killed run: its lock, work folder and the earlier run it had set aside remain.
        std::fs::write(root.path().join(".r.lock"), format!("pid {DEAD}\nhost {}\n", host())).unwrap();
        std::fs::create_dir_all(sibling(&dir, "partial", DEAD)).unwrap();
        std::fs::create_dir_all(sibling(&dir, "old", DEAD)).unwrap();
        std::fs::write(sibling(&dir, "old", DEAD).join("report.md"), "earlier").unwrap();
        let t = Target::open(&dir).unwrap();
        assert_eq!(t.cleaned.len(), 3, "{:?}", t.cleaned);
        assert_eq!(std::fs::read_to_string(dir.join("report.md")).unwrap(), "earlier", "the earlier run is put back");
        assert!(!sibling(&dir, "partial", DEAD).exists());
        // A lock of another host is never taken over.
        drop(t);
        std::fs::write(root.path().join(".r.lock"), format!("pid {DEAD}\nhost some-other-host\n")).unwrap();
        assert!(Target::open(&dir).unwrap_err().to_string().contains("some-other-host"));
    }
}

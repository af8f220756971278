//! Writing the output folder atomically: everything goes to a hidden temporary folder beside
//! the target, which is moved into place only when complete, so an interrupted run leaves
//! either the old report or the new one, never a mix.
//!
//! Replacing an existing report: on Linux the finished folder and the old one are swapped in
//! one atomic `renameat2(RENAME_EXCHANGE)`, so at every instant `OUT/<name>` is a complete
//! report (old, then new); the old one is then deleted. Elsewhere the old folder is first
//! renamed aside, which leaves a window of a few microseconds in which `OUT/<name>` is
//! absent (the old report then survives as `OUT/.<name>.previous-<pid>`).
//!
//! The folder name is a validated plan name (ASCII letters, digits, `-`, `_`), so it can
//! never be `..` or contain a separator: nothing is written outside `OUT`.

use crate::error::Error;
use std::fs;
use std::path::{Path, PathBuf};

fn output_error(path: &Path, reason: impl std::fmt::Display) -> Error {
    Error::Output {
        path: path.to_owned(),
        reason: reason.to_string(),
    }
}

/// Whether `name` can name a folder inside `OUT` without escaping it.
pub fn is_safe_folder_name(name: &str) -> bool {
    !name.is_empty()
        && name.len() <= 100
        && name
            .chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '-' || c == '_')
}

/// Checks, without writing anything, that `out_dir` is an existing folder or can be created:
/// it must not be a file, and its nearest existing ancestor must be a folder.
pub fn check_output_dir(out_dir: &Path) -> Result<(), Error> {
    if out_dir.as_os_str().is_empty() {
        return Err(output_error(
            out_dir,
            "the output folder is empty; pass a folder to --out",
        ));
    }
    if out_dir.exists() {
        if !out_dir.is_dir() {
            return Err(output_error(
                out_dir,
                "exists and is not a folder; pass a folder to --out",
            ));
        }
        return try_writing_in(out_dir, out_dir);
    }
    let mut ancestor = out_dir.parent();
    while let Some(dir) = ancestor {
        if dir.as_os_str().is_empty() || dir.exists() {
            if !dir.as_os_str().is_empty() && !dir.is_dir() {
                return Err(output_error(
                    out_dir,
                    format!(
                        "{} is not a folder, so --out cannot be created there",
                        dir.display()
                    ),
                ));
            }
            let existing = if dir.as_os_str().is_empty() {
                Path::new(".")
            } else {
                dir
            };
            return try_writing_in(existing, out_dir);
        }
        ancestor = dir.parent();
    }
    Ok(())
}

/// Decides whether a folder can be written in by trying: creating and removing an empty
/// folder there. Permission bits alone answer wrongly (root writes into a mode-0555 folder;
/// a read-only mount or an ACL refuses a writable-looking one).
fn try_writing_in(dir: &Path, out_dir: &Path) -> Result<(), Error> {
    let probe = dir.join(format!(".linbudget-probe-{}", std::process::id()));
    match fs::create_dir(&probe) {
        Ok(()) => {
            let _ = fs::remove_dir(&probe);
            Ok(())
        }
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => Ok(()),
        Err(e) => Err(output_error(
            out_dir,
            format!(
                "nothing can be written in {} ({e}); pass a writable folder to --out",
                dir.display()
            ),
        )),
    }
}

/// Whether the process that left a staging folder named `.NAME.partial-PID` or
/// `.NAME.previous-PID` may still be running (so the folder may still be in use).
fn may_be_running(pid: u32) -> bool {
    if pid == std::process::id() {
        return false;
    }
    #[cfg(target_os = "linux")]
    {
        // A killed run not yet reaped by its parent stays in /proc as a zombie ('Z') or
        // dying ('X') process: it is not running.
        match fs::read_to_string(Path::new("/proc").join(pid.to_string()).join("stat")) {
            Ok(stat) => !matches!(
                stat.rsplit_once(')')
                    .and_then(|(_, rest)| rest.trim_start().chars().next()),
                Some('Z' | 'X')
            ),
            Err(_) => false,
        }
    }
    #[cfg(not(target_os = "linux"))]
    {
        true
    }
}

/// Removes the staging folders an interrupted run of the same report left behind
/// (`.NAME.partial-PID`, `.NAME.previous-PID` whose process is gone). Folders of a run that
/// may still be going are left alone; elsewhere than Linux, only those older than a day.
pub fn remove_stale_staging(out_dir: &Path, name: &str) {
    let Ok(entries) = fs::read_dir(out_dir) else {
        return;
    };
    let prefixes = [format!(".{name}.partial-"), format!(".{name}.previous-")];
    for entry in entries.flatten() {
        let file_name = entry.file_name();
        let Some(file_name) = file_name.to_str() else {
            continue;
        };
        let Some(pid) = prefixes
            .iter()
            .find_map(|prefix| file_name.strip_prefix(prefix.as_str()))
            .and_then(|pid| pid.parse::<u32>().ok())
        else {
            continue;
        };
        let is_dir = entry.file_type().is_ok_and(|t| t.is_dir());
        let old = entry
            .metadata()
            .and_then(|m| m.modified())
            .ok()
            .and_then(|t| t.elapsed().ok())
            .is_some_and(|age| age.as_secs() > 24 * 3600);
        let stale = if cfg!(target_os = "linux") {
            !may_be_running(pid)
        } else {
            old
        };
        if is_dir && stale {
            let _ = fs::remove_dir_all(entry.path());
        }
    }
}

/// Writes `out_dir/<name>/`, replacing any previous report of that name whole, from `fill`,
/// which puts each file into the staging folder as soon as it is ready (from any thread), so
/// writing overlaps the drawing of the rest. The folder is installed whole when `fill`
/// succeeds; when anything fails nothing new is left behind (a folder `out_dir` created by
/// this call is removed again) and the previous report is intact.
pub fn write_report_folder(
    out_dir: &Path,
    name: &str,
    fill: impl FnOnce(&Staging) -> Result<(), Error>,
) -> Result<PathBuf, Error> {
    if !is_safe_folder_name(name) {
        return Err(output_error(
            &out_dir.join(name),
            "the plan name cannot name a folder inside --out",
        ));
    }
    check_output_dir(out_dir)?;
    let created = create_missing(out_dir)?;
    let result = write_inside(out_dir, name, fill);
    if result.is_err() {
        // Remove only folders this call created, deepest first, and only while empty.
        for dir in created.iter().rev() {
            let _ = fs::remove_dir(dir);
        }
    }
    result
}

/// The hidden folder a report is written into before it is moved into place.
pub struct Staging {
    dir: PathBuf,
}

impl Staging {
    /// The path of file `name` in the staging folder, refused unless `name` is a plain file
    /// name (no folder part).
    fn path_of(&self, name: &str) -> Result<PathBuf, Error> {
        let path = self.dir.join(name);
        if !is_safe_file_name(name) {
            return Err(output_error(
                &path,
                "not a plain file name inside the report folder",
            ));
        }
        Ok(path)
    }

    /// Writes one file of the report. `name` is a plain file name (no folder part); this may
    /// be called from several threads at once for different files.
    pub fn put(&self, name: &str, bytes: &[u8]) -> Result<(), Error> {
        use std::io::Write;
        let path = self.path_of(name)?;
        let mut file = fs::File::create(&path).map_err(|e| output_error(&path, e))?;
        file.write_all(bytes).map_err(|e| output_error(&path, e))?;
        // On disk before the folder is swapped in: a crash after the swap must not leave a
        // report of empty files.
        file.sync_all().map_err(|e| output_error(&path, e))
    }

    /// Writes one file of the report by streaming into it through a buffer, for large
    /// tables that need not be held in memory whole. `write` reports failures as text.
    pub fn put_streamed(
        &self,
        name: &str,
        write: impl FnOnce(&mut std::io::BufWriter<fs::File>) -> Result<(), String>,
    ) -> Result<(), Error> {
        let path = self.path_of(name)?;
        let file = fs::File::create(&path).map_err(|e| output_error(&path, e))?;
        let mut buffered = std::io::BufWriter::with_capacity(1 << 16, file);
        write(&mut buffered).map_err(|reason| output_error(&path, reason))?;
        use std::io::Write;
        buffered.flush().map_err(|e| output_error(&path, e))?;
        buffered
            .get_ref()
            .sync_all()
            .map_err(|e| output_error(&path, e))
    }
}

/// Whether `name` names a file directly inside the report folder.
fn is_safe_file_name(name: &str) -> bool {
    !name.is_empty() && name != "." && name != ".." && !name.contains(['/', '\\', '\0'])
}

/// Creates `dir` and its missing ancestors, returning those it created (outermost first).
fn create_missing(dir: &Path) -> Result<Vec<PathBuf>, Error> {
    let mut missing = Vec::new();
    let mut current = Some(dir);
    while let Some(path) = current {
        if path.as_os_str().is_empty() || path.exists() {
            break;
        }
        missing.push(path.to_owned());
        current = path.parent();
    }
    missing.reverse();
    let mut created = Vec::new();
    for path in missing {
        match fs::create_dir(&path) {
            Ok(()) => created.push(path),
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists && path.is_dir() => {}
            Err(e) => {
                for dir in created.iter().rev() {
                    let _ = fs::remove_dir(dir);
                }
                return Err(output_error(&path, e));
            }
        }
    }
    Ok(created)
}

fn write_inside(
    out_dir: &Path,
    name: &str,
    fill: impl FnOnce(&Staging) -> Result<(), Error>,
) -> Result<PathBuf, Error> {
    let target = out_dir.join(name);
    if target.exists() && !target.is_dir() {
        return Err(output_error(
            &target,
            "exists and is not a folder; remove it or choose another --out",
        ));
    }
    remove_stale_staging(out_dir, name);
    let staging = out_dir.join(format!(".{name}.partial-{}", std::process::id()));
    if staging.exists() {
        fs::remove_dir_all(&staging).map_err(|e| output_error(&staging, e))?;
    }
    let result = (|| {
        fs::create_dir(&staging).map_err(|e| output_error(&staging, e))?;
        fill(&Staging {
            dir: staging.clone(),
        })?;
        // The folder's entries on disk too, then the swap, then the swap itself.
        sync_folder(&staging)?;
        install(&staging, &target, out_dir, name)?;
        sync_folder(out_dir)?;
        Ok(target.clone())
    })();
    if staging.exists() {
        // After a successful exchange this holds the previous report; after a failure, the
        // unfinished new one. Either way it is no longer wanted.
        let _ = fs::remove_dir_all(&staging);
    }
    result
}

/// Flushes a folder's entries to disk (a no-op where folders cannot be opened as files).
fn sync_folder(dir: &Path) -> Result<(), Error> {
    #[cfg(unix)]
    {
        let handle = fs::File::open(dir).map_err(|e| output_error(dir, e))?;
        handle.sync_all().map_err(|e| output_error(dir, e))?;
    }
    #[cfg(not(unix))]
    let _ = dir;
    Ok(())
}

/// Moves the finished `staging` folder to `target`; afterwards `staging` holds the previous
/// report, if there was one.
fn install(staging: &Path, target: &Path, out_dir: &Path, name: &str) -> Result<(), Error> {
    if !target.exists() {
        return fs::rename(staging, target).map_err(|e| output_error(target, e));
    }
    #[cfg(target_os = "linux")]
    {
        use rustix::fs::{renameat_with, RenameFlags, CWD};
        match renameat_with(CWD, staging, CWD, target, RenameFlags::EXCHANGE) {
            Ok(()) => return Ok(()),
            // File systems without RENAME_EXCHANGE fall through to the two-step move.
            Err(e) if e == rustix::io::Errno::INVAL || e == rustix::io::Errno::NOSYS => {}
            Err(e) => return Err(output_error(target, std::io::Error::from(e))),
        }
    }
    let previous = out_dir.join(format!(".{name}.previous-{}", std::process::id()));
    fs::rename(target, &previous).map_err(|e| output_error(target, e))?;
    if let Err(e) = fs::rename(staging, target) {
        let _ = fs::rename(&previous, target);
        return Err(output_error(target, e));
    }
    fs::rename(&previous, staging).map_err(|e| output_error(&previous, e))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A one-file report.
    fn report(text: &str) -> impl FnOnce(&Staging) -> Result<(), Error> + '_ {
        move |staging| staging.put("report.json", text.as_bytes())
    }

    #[test]
    fn a_second_run_replaces_the_first_whole_and_leaves_no_litter() {
        let dir = tempfile::tempdir().unwrap();
        write_report_folder(dir.path(), "p", report("old")).unwrap();
        let folder = write_report_folder(dir.path(), "p", report("new")).unwrap();
        assert_eq!(
            fs::read_to_string(folder.join("report.json")).unwrap(),
            "new"
        );
        let names: Vec<_> = fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        assert_eq!(names, vec![std::ffi::OsString::from("p")]);
    }

    #[test]
    fn a_failed_write_keeps_the_previous_report() {
        let dir = tempfile::tempdir().unwrap();
        write_report_folder(dir.path(), "p", report("old")).unwrap();
        // A file name with a folder part is refused.
        let bad = |staging: &Staging| staging.put("missing/report.json", b"new");
        assert!(write_report_folder(dir.path(), "p", bad).is_err());
        assert_eq!(
            fs::read_to_string(dir.path().join("p/report.json")).unwrap(),
            "old"
        );
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 1);
    }

    #[test]
    fn staging_folders_of_a_killed_run_are_removed_by_the_next() {
        // A process id that cannot be running: above Linux's largest pid (2^22).
        let dir = tempfile::tempdir().unwrap();
        let stale = dir.path().join(".p.partial-4999999");
        fs::create_dir(&stale).unwrap();
        fs::write(stale.join("report.json"), "half").unwrap();
        let other_report = dir.path().join(".q.partial-4999999");
        fs::create_dir(&other_report).unwrap();
        write_report_folder(dir.path(), "p", report("new")).unwrap();
        if cfg!(target_os = "linux") {
            assert!(!stale.exists());
        }
        // Another report's staging is not this run's to judge.
        assert!(other_report.exists());
        // A staging folder of a process still running (this test's parent) stays.
        #[cfg(unix)]
        {
            let live = dir.path().join(format!(
                ".p.partial-{}",
                std::os::unix::process::parent_id()
            ));
            fs::create_dir(&live).unwrap();
            write_report_folder(dir.path(), "p", report("newer")).unwrap();
            assert!(live.exists());
        }
    }

    #[test]
    fn writability_is_decided_by_trying() {
        let dir = tempfile::tempdir().unwrap();
        check_output_dir(&dir.path().join("a/b")).unwrap();
        check_output_dir(dir.path()).unwrap();
        assert_eq!(
            fs::read_dir(dir.path()).unwrap().count(),
            0,
            "no probe left"
        );
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let locked = dir.path().join("locked");
            fs::create_dir(&locked).unwrap();
            fs::set_permissions(&locked, fs::Permissions::from_mode(0o555)).unwrap();
            // Whatever the permission bits say, the answer is whether a folder can be made
            // there (root can; others cannot).
            let can = fs::create_dir(locked.join("x")).is_ok();
            let _ = fs::remove_dir(locked.join("x"));
            assert_eq!(check_output_dir(&locked).is_ok(), can);
            assert_eq!(check_output_dir(&locked.join("sub")).is_ok(), can);
            fs::set_permissions(&locked, fs::Permissions::from_mode(0o755)).unwrap();
        }
    }

    #[test]
    fn names_that_could_escape_the_folder_are_refused() {
        let dir = tempfile::tempdir().unwrap();
        for name in ["..", "../x", "a/b", "", "/abs"] {
            assert!(write_report_folder(&dir.path().join("out"), name, report("x")).is_err());
        }
        assert_eq!(fs::read_dir(dir.path()).unwrap().count(), 0);
    }
}

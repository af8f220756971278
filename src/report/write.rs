//! Writing the output folder atomically: everything goes to a hidden temporary folder beside
//! the target, which is renamed into place only when complete, so an interrupted run leaves
//! either the old report or the new one, never a mix.

use crate::error::Error;
use std::fs;
use std::path::{Path, PathBuf};

/// One file of the output folder.
pub struct OutputFile {
    /// File name inside the plan's folder.
    pub name: String,
    /// Contents.
    pub bytes: Vec<u8>,
}

fn output_error(path: &Path, reason: impl std::fmt::Display) -> Error {
    Error::Output {
        path: path.to_owned(),
        reason: reason.to_string(),
    }
}

/// Checks that `out_dir` is usable (an existing folder, or creatable) without writing.
pub fn check_output_dir(out_dir: &Path) -> Result<(), Error> {
    if out_dir.exists() && !out_dir.is_dir() {
        return Err(output_error(out_dir, "exists and is not a folder; pass a folder to --out"));
    }
    Ok(())
}

/// Writes `files` as `out_dir/<name>/`, replacing any previous report of that name whole.
pub fn write_report_folder(out_dir: &Path, name: &str, files: &[OutputFile]) -> Result<PathBuf, Error> {
    check_output_dir(out_dir)?;
    fs::create_dir_all(out_dir).map_err(|e| output_error(out_dir, e))?;
    let target = out_dir.join(name);
    let staging = out_dir.join(format!(".{name}.partial-{}", std::process::id()));
    if staging.exists() {
        fs::remove_dir_all(&staging).map_err(|e| output_error(&staging, e))?;
    }
    let result = (|| {
        fs::create_dir(&staging).map_err(|e| output_error(&staging, e))?;
        for file in files {
            let path = staging.join(&file.name);
            fs::write(&path, &file.bytes).map_err(|e| output_error(&path, e))?;
        }
        let previous = out_dir.join(format!(".{name}.previous-{}", std::process::id()));
        if target.exists() {
            fs::rename(&target, &previous).map_err(|e| output_error(&target, e))?;
        }
        fs::rename(&staging, &target).map_err(|e| output_error(&target, e))?;
        if previous.exists() {
            fs::remove_dir_all(&previous).map_err(|e| output_error(&previous, e))?;
        }
        Ok(target.clone())
    })();
    if result.is_err() && staging.exists() {
        let _ = fs::remove_dir_all(&staging);
    }
    result
}

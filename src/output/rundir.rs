//! A run folder filled in a temporary sibling folder and renamed into place, so a failed or
//! refused run leaves the previous outputs untouched.

use std::fs;
use std::path::{Path, PathBuf};

/// Why the output folder cannot be used.
#[derive(Debug, thiserror::Error)]
pub enum OutputError {
    #[error("cannot write to '{path}': {reason}")]
    NotWritable { path: String, reason: String },
    #[error("could not write '{path}': {reason}")]
    Write { path: String, reason: String },
    #[error("could not move the finished run into '{path}': {reason}")]
    Rename { path: String, reason: String },
}

/// A staging folder next to the final folder.
#[derive(Debug)]
pub struct Staging {
    target: PathBuf,
    temp: Option<tempfile::TempDir>,
}

impl Staging {
    /// Checks that `target`'s parent can be created and written, and makes the staging folder.
    /// Call this before spending time on simulation.
    pub fn prepare(target: &Path) -> Result<Self, OutputError> {
        let parent = target
            .parent()
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or_else(|| Path::new("."));
        let not_writable = |e: std::io::Error| OutputError::NotWritable {
            path: target.display().to_string(),
            reason: e.to_string(),
        };
        if target.exists() && !target.is_dir() {
            return Err(OutputError::NotWritable {
                path: target.display().to_string(),
                reason: "it exists and is not a folder".into(),
            });
        }
        fs::create_dir_all(parent).map_err(not_writable)?;
        let name = target
            .file_name()
            .map_or_else(|| "run".to_string(), |n| n.to_string_lossy().into_owned());
        let temp = tempfile::Builder::new()
            .prefix(&format!(".{name}.partial-"))
            .tempdir_in(parent)
            .map_err(not_writable)?;
        Ok(Self {
            target: target.to_path_buf(),
            temp: Some(temp),
        })
    }

    /// Path of the staging folder.
    pub fn dir(&self) -> &Path {
        self.temp
            .as_ref()
            .map_or(self.target.as_path(), |t| t.path())
    }

    /// Writes one file into the staging folder.
    pub fn write(&self, name: &str, bytes: &[u8]) -> Result<(), OutputError> {
        let p = self.dir().join(name);
        fs::write(&p, bytes).map_err(|e| OutputError::Write {
            path: p.display().to_string(),
            reason: e.to_string(),
        })
    }

    /// Replaces the target folder with the staging folder (old one removed after the swap).
    pub fn commit(mut self) -> Result<PathBuf, OutputError> {
        let Some(temp) = self.temp.take() else {
            return Ok(self.target.clone());
        };
        let staged = temp.keep();
        let fail = |e: std::io::Error| OutputError::Rename {
            path: self.target.display().to_string(),
            reason: e.to_string(),
        };
        if self.target.exists() {
            let old = self.target.with_file_name(format!(
                ".{}.old-{}",
                self.target
                    .file_name()
                    .map_or_else(|| "run".into(), |n| n.to_string_lossy().into_owned()),
                std::process::id()
            ));
            let _ = fs::remove_dir_all(&old);
            fs::rename(&self.target, &old).map_err(fail)?;
            if let Err(e) = fs::rename(&staged, &self.target) {
                let _ = fs::rename(&old, &self.target);
                return Err(fail(e));
            }
            let _ = fs::remove_dir_all(&old);
        } else {
            fs::rename(&staged, &self.target).map_err(fail)?;
        }
        Ok(self.target.clone())
    }
}

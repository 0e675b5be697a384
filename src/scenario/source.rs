//! One input's text: a file on disk or a shipped copy built into the binary, with the name
//! messages use for it.

use super::demo;
use super::error::InputError;
use super::suggest;

/// The text of one input and the name used in messages.
#[derive(Debug, Clone, PartialEq)]
pub struct SourceText {
    /// File path as given, or the repository path of a built-in file with ` (built-in)`.
    pub name: String,
    pub text: String,
    /// Whether the text is the copy built into the binary (no such file on disk).
    pub built_in: bool,
}

/// Which kind of input a source is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum InputKind {
    Setup,
    Profile,
}

impl SourceText {
    /// Reads a path, or a shipped name (`demo`, `steady`…); None gives the shipped default. A
    /// shipped name is the file in `profiles/` under the working directory when one is there (so a
    /// user's edit of it counts), else the copy built into the binary. Only a file is read: a
    /// folder that happens to bear a shipped name does not shadow it.
    pub fn resolve(arg: Option<&str>, kind: InputKind) -> Result<Self, InputError> {
        let list: &[demo::Embedded] = match kind {
            InputKind::Setup => demo::SETUPS,
            InputKind::Profile => demo::PROFILES,
        };
        let shipped = |e: &demo::Embedded| {
            if std::path::Path::new(e.path).is_file() {
                Self::read(e.path)
            } else {
                Ok(Self::embedded(e))
            }
        };
        let Some(arg) = arg else {
            return shipped(&list[0]);
        };
        if std::path::Path::new(arg).is_file() {
            return Self::read(arg);
        }
        if let Some(e) = list.iter().find(|e| e.name == arg) {
            return shipped(e);
        }
        let names: Vec<&str> = list.iter().map(|e| e.name).collect();
        let reason = if std::path::Path::new(arg).is_dir() {
            "a folder, not a file"
        } else {
            "no such file"
        };
        let hint = suggest::nearest(arg, &names)
            .map(|n| format!("; did you mean `{n}`?"))
            .unwrap_or_default();
        Err(InputError::Read {
            path: arg.to_string(),
            reason: format!(
                "{reason}, and not a shipped name (shipped: {}){hint}",
                names.join(", ")
            ),
        })
    }

    /// Reads a file.
    fn read(path: &str) -> Result<Self, InputError> {
        std::fs::read_to_string(path)
            .map(|text| Self {
                name: path.to_string(),
                text,
                built_in: false,
            })
            .map_err(|e| InputError::Read {
                path: path.to_string(),
                reason: e.to_string(),
            })
    }

    fn embedded(e: &demo::Embedded) -> Self {
        Self {
            name: format!("{} (built-in)", e.path),
            text: e.text.to_string(),
            built_in: true,
        }
    }

    /// First 12 hex digits of the SHA-256 of the text: which version of a file a run used.
    pub fn hash(&self) -> String {
        use sha2::{Digest, Sha256};
        let d = Sha256::digest(self.text.as_bytes());
        d.iter().take(6).map(|b| format!("{b:02x}")).collect()
    }

    /// Short name for summaries: the file stem.
    pub fn stem(&self) -> String {
        let first = self.name.split(' ').next().unwrap_or(&self.name);
        std::path::Path::new(first)
            .file_stem()
            .map_or_else(|| first.to_string(), |s| s.to_string_lossy().into_owned())
    }
}

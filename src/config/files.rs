//! The one place the configuration touches the file system: reading the configuration file,
//! the species files it names, and checking that a named file can be read.

use std::fs;
use std::io;
use std::path::{Path, PathBuf};

use crate::config::error::{ConfigErrors, Problems};
use crate::config::from_str;
use crate::config::settings::Settings;
use crate::thermo::species::SpeciesDb;

/// An I/O error as a lower-case reason.
fn io_reason(e: &io::Error) -> String {
    match e.kind() {
        io::ErrorKind::NotFound => "no such file".to_string(),
        io::ErrorKind::PermissionDenied => "permission denied".to_string(),
        io::ErrorKind::IsADirectory => "it is a folder, not a file".to_string(),
        _ => {
            let text = e.to_string();
            let mut chars = text.chars();
            match chars.next() {
                Some(first) => first.to_lowercase().chain(chars).collect(),
                None => "unknown i/o error".to_string(),
            }
        }
    }
}

// ---------------------------------------------------------------------------
// Durations

/// Reads and validates the configuration at `path`; relative paths inside it are
/// taken from the file's folder.
pub fn load(path: &Path) -> Result<Settings, ConfigErrors> {
    let text = fs::read_to_string(path).map_err(|e| {
        ConfigErrors::one(
            "(file)",
            format!("cannot read {}: {}", path.display(), io_reason(&e)),
        )
    })?;
    let base = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    from_str(&text, base)
}

pub(crate) fn species_db(problems: &mut Problems, files: &[String], base: &Path) -> SpeciesDb {
    let mut db = SpeciesDb::builtin();
    for (i, f) in files.iter().enumerate() {
        let path = format!("species_files[{i}]");
        let full = base.join(f);
        match fs::read_to_string(&full) {
            Ok(text) => {
                if let Err(e) = db.merge_toml(&text, f) {
                    problems.add(path, e.to_string());
                }
            }
            Err(e) => problems.add(
                path,
                format!("cannot read {}: {}", full.display(), io_reason(&e)),
            ),
        }
    }
    db
}

/// Reads a file that must exist and be readable; returns its full path.
pub(crate) fn readable_file(
    problems: &mut Problems,
    path: &str,
    base: &Path,
    given: &str,
) -> PathBuf {
    let full = base.join(given);
    if given.is_empty() {
        problems.add(path, "is empty; give a file path");
        return full;
    }
    match fs::File::open(&full).and_then(|f| f.metadata()) {
        Ok(m) if m.is_file() => {}
        Ok(_) => problems.add(path, format!("{} is not a file", full.display())),
        Err(e) => problems.add(
            path,
            format!("cannot read {}: {}", full.display(), io_reason(&e)),
        ),
    }
    full
}

/// The broker password from `broker.password_file` (relative to `base`), without its final
/// line break; a problem when the file cannot be read or is empty.
pub(crate) fn password_file(problems: &mut Problems, file: &str, base: &Path) -> Option<String> {
    let full = base.join(file);
    match fs::read_to_string(&full) {
        Ok(text) => {
            let secret = text.trim_end_matches(['\r', '\n']).to_string();
            if secret.is_empty() {
                problems.add(
                    "broker.password_file",
                    format!("{} is empty", full.display()),
                );
            }
            Some(secret)
        }
        Err(e) => {
            problems.add(
                "broker.password_file",
                format!("cannot read {}: {}", full.display(), io_reason(&e)),
            );
            None
        }
    }
}

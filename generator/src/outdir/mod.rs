//! Output folders on disk: reading one without following links ([`walk`]), replacing
//! one without ever losing a user's file ([`replace`]), and telling how one differs
//! from what `generate` would write now ([`compare`]), which `generate --check` and
//! `verify` share so that they always agree.

pub mod replace;
pub mod walk;

use crate::emit::marker::{self, sha256_hex, Record, MARKER};
use crate::emit::OutFile;
use std::fmt;
use std::fs;
use std::path::Path;

pub use replace::write_tree;

/// How one path of an output folder differs from a fresh generation.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Difference {
    /// `generate` would write it; the folder lacks it.
    New(String),
    /// Both have it; the first differing line.
    Changed(String, usize),
    /// arcwright wrote it before and no longer does: `generate` would delete it.
    Removed(String),
    /// Not arcwright's (added, edited, a link, …): `generate` refuses while it is there.
    Foreign(String, &'static str),
}

impl Difference {
    pub fn path(&self) -> &str {
        match self {
            Difference::New(p)
            | Difference::Changed(p, _)
            | Difference::Removed(p)
            | Difference::Foreign(p, _) => p,
        }
    }
}

impl fmt::Display for Difference {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Difference::New(p) => write!(f, "new      {p}"),
            Difference::Changed(p, line) => write!(f, "changed  {p} (from line {line})"),
            Difference::Removed(p) => write!(f, "removed  {p}"),
            Difference::Foreign(p, why) => write!(f, "foreign  {p} ({why})"),
        }
    }
}

/// Whether the marker lists `path` with other contents than `bytes` (a marker without
/// a list vouches for nothing and flags nothing).
fn edited(record: &Record, path: &str, bytes: &[u8]) -> bool {
    record
        .files
        .as_ref()
        .and_then(|m| m.get(path))
        .is_some_and(|sha| sha != &sha256_hex(bytes))
}

/// The folder's marker, read back; `None` when there is none that arcwright wrote.
pub fn read_marker(dir: &Path) -> Option<Record> {
    let path = dir.join(MARKER);
    let meta = fs::symlink_metadata(&path).ok()?;
    if !meta.is_file() || meta.len() >= (1 << 20) {
        return None;
    }
    marker::parse(&fs::read_to_string(path).ok()?)
}

/// How `dir` differs from `files`, sorted by path; build products of the shipped tests
/// are passed over. A folder that does not exist differs by every file being new; one
/// that exists must carry a marker arcwright wrote, else this is an error (and nothing
/// below it is read).
pub fn compare(dir: &Path, files: &[OutFile]) -> Result<Vec<Difference>, String> {
    if fs::symlink_metadata(dir).is_err() {
        return Ok(files
            .iter()
            .map(|(p, _)| Difference::New(p.clone()))
            .collect());
    }
    if !dir.is_dir() || fs::symlink_metadata(dir).is_ok_and(|m| m.file_type().is_symlink()) {
        return Err(format!("{}: not a folder", dir.display()));
    }
    let record = read_marker(dir).ok_or_else(|| {
        format!(
            "{}: not an arcwright output folder (no {MARKER} file that arcwright wrote)",
            dir.display()
        )
    })?;
    let listing = walk::walk(dir)?;
    let mut out = Vec::new();
    for (path, _) in files {
        if !listing.files.contains(path) {
            out.push(Difference::New(path.clone()));
        }
    }
    for path in &listing.files {
        let fresh = files
            .iter()
            .find(|(p, _)| p == path)
            .map(|(_, t)| t.as_bytes());
        // A marker of an early version lists no files: it vouches for the paths
        // `generate` writes now (and flags no edits).
        let ours = match &record.files {
            Some(manifest) => manifest.contains_key(path) || path == MARKER,
            None => fresh.is_some(),
        };
        if !ours {
            out.push(Difference::Foreign(
                path.clone(),
                "not written by arcwright",
            ));
            continue;
        }
        let have = fs::read(dir.join(path)).map_err(|e| format!("reading {path}: {e}"))?;
        if edited(&record, path, &have) {
            out.push(Difference::Foreign(
                path.clone(),
                "edited since arcwright wrote it",
            ));
            continue;
        }
        match fresh {
            None => out.push(Difference::Removed(path.clone())),
            Some(text) if text != have => {
                let at = have
                    .iter()
                    .zip(text)
                    .position(|(x, y)| x != y)
                    .unwrap_or(have.len().min(text.len()));
                let line = have[..at].iter().filter(|&&c| c == b'\n').count() + 1;
                out.push(Difference::Changed(path.clone(), line));
            }
            Some(_) => {}
        }
    }
    for (path, what) in listing.others {
        out.push(Difference::Foreign(path, what));
    }
    out.sort_by(|a, b| a.path().cmp(b.path()));
    Ok(out)
}

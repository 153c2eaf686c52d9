//! Writing an output tree atomically: everything goes to a fresh folder next to the
//! destination, which then replaces it by rename, so an error never leaves a
//! half-written tree. An existing destination is only replaced if it carries the
//! marker file of an earlier run (never a folder of the user's own).

use super::{Meta, OutFile};
use std::fs;
use std::path::Path;

/// Marker file at the top of every output folder.
pub const MARKER: &str = "ARCWRIGHT_OUTPUT";

pub fn marker_text(meta: &Meta) -> String {
    format!(
        "This folder is written by arcwright {} (arm file SHA-256 {}).\n\
         `arcwright generate` replaces it as a whole: do not keep other files here.\n",
        meta.version, meta.arm_sha256
    )
}

pub fn write_tree(dir: &Path, files: &[OutFile]) -> Result<(), String> {
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => std::path::PathBuf::from("."),
    };
    fs::create_dir_all(&parent).map_err(|e| format!("creating {}: {e}", parent.display()))?;
    if dir.exists() {
        let empty = fs::read_dir(dir)
            .map_err(|e| format!("reading {}: {e}", dir.display()))?
            .next()
            .is_none();
        if !empty && !dir.join(MARKER).is_file() {
            return Err(format!(
                "{} exists and is not an arcwright output folder (no {MARKER} file); refusing to replace it",
                dir.display()
            ));
        }
    }
    let tmp = tempfile::Builder::new()
        .prefix(".arcwright-new-")
        .tempdir_in(&parent)
        .map_err(|e| format!("creating a temporary folder in {}: {e}", parent.display()))?;
    for (rel, text) in files {
        let path = tmp.path().join(rel);
        if let Some(p) = path.parent() {
            fs::create_dir_all(p).map_err(|e| format!("creating {}: {e}", p.display()))?;
        }
        fs::write(&path, text).map_err(|e| format!("writing {}: {e}", path.display()))?;
    }
    let staged = tmp.keep();
    if dir.exists() {
        let old = tempfile::Builder::new()
            .prefix(".arcwright-old-")
            .tempdir_in(&parent)
            .map_err(|e| format!("creating a temporary folder in {}: {e}", parent.display()))?
            .keep();
        let old_dir = old.join("out");
        if let Err(e) = fs::rename(dir, &old_dir) {
            let _ = fs::remove_dir_all(&staged);
            let _ = fs::remove_dir_all(&old);
            return Err(format!("moving the old {} aside: {e}", dir.display()));
        }
        if let Err(e) = fs::rename(&staged, dir) {
            let _ = fs::rename(&old_dir, dir);
            let _ = fs::remove_dir_all(&staged);
            let _ = fs::remove_dir_all(&old);
            return Err(format!("moving the new tree into {}: {e}", dir.display()));
        }
        let _ = fs::remove_dir_all(&old);
    } else if let Err(e) = fs::rename(&staged, dir) {
        let _ = fs::remove_dir_all(&staged);
        return Err(format!("moving the new tree into {}: {e}", dir.display()));
    }
    Ok(())
}

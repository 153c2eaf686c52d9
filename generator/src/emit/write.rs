//! Writing an output tree atomically: everything goes to a fresh folder next to the
//! destination, which then replaces it by rename, so an error never leaves a
//! half-written tree. An existing destination is only replaced if it carries the
//! marker file of an earlier run (never a folder of the user's own).

use super::{Meta, Options, OutFile, Precision};
use std::fs;
use std::path::Path;

/// Marker file at the top of every output folder.
pub const MARKER: &str = "ARCWRIGHT_OUTPUT";

pub fn marker_text(meta: &Meta, options: &Options) -> String {
    format!(
        "This folder is written by arcwright {} (arm file SHA-256 {}).\n\
         {OPTIONS_LINE} --precision {}{}\n\
         `arcwright generate` replaces it as a whole: do not keep other files here.\n",
        meta.version,
        meta.arm_sha256,
        match options.precision {
            Precision::F32 => "f32",
            Precision::F64 => "f64",
        },
        if options.optimised { " --optimise" } else { "" },
    )
}

/// Start of the marker line that records the generate options.
const OPTIONS_LINE: &str = "Generated with:";

/// The options a marker records, or `None` for a marker that records none.
pub fn marker_options(marker: &str) -> Option<Options> {
    let line = marker.lines().find(|l| l.starts_with(OPTIONS_LINE))?;
    let words: Vec<&str> = line[OPTIONS_LINE.len()..].split_whitespace().collect();
    let precision = match words.windows(2).find(|w| w[0] == "--precision")?[1] {
        "f32" => Precision::F32,
        "f64" => Precision::F64,
        _ => return None,
    };
    Some(Options {
        precision,
        optimised: words.contains(&"--optimise"),
    })
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_marker_records_the_generate_options() {
        let meta = Meta::new("name = \"x\"", 3);
        for (precision, optimised) in [
            (Precision::F64, false),
            (Precision::F32, false),
            (Precision::F64, true),
            (Precision::F32, true),
        ] {
            let o = Options {
                precision,
                optimised,
            };
            let back = marker_options(&marker_text(&meta, &o)).expect("options recorded");
            assert_eq!(back.precision, precision);
            assert_eq!(back.optimised, optimised);
        }
        assert!(marker_options("This folder is written by arcwright 0.1.0.\n").is_none());
    }
}

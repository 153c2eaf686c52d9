//! Reading an output folder without trusting it: symbolic links are never followed
//! (a link to `/` or to `..` would walk the machine or loop), the number of entries is
//! bounded (so `--out /` ends at once), and the shipped tests' build products are set
//! apart rather than walked.

use crate::emit::BUILD_ARTEFACTS;
use std::fs;
use std::path::Path;

/// Most entries a walk reads before it gives up: an output folder holds a few dozen.
pub const MAX_ENTRIES: usize = 10_000;

/// What a folder holds, by relative path with `/` separators, each list sorted.
#[derive(Debug, Default)]
pub struct Listing {
    /// Regular files.
    pub files: Vec<String>,
    /// Build products of the shipped tests that are present (see [`BUILD_ARTEFACTS`]).
    pub artefacts: Vec<String>,
    /// Entries that are neither folders nor regular files, with what they are.
    pub others: Vec<(String, &'static str)>,
}

/// Lists `dir`; an error names the folder and the cause.
pub fn walk(dir: &Path) -> Result<Listing, String> {
    let mut listing = Listing::default();
    let mut seen = 0usize;
    let mut stack = vec![String::new()];
    while let Some(rel) = stack.pop() {
        let at = if rel.is_empty() {
            dir.to_path_buf()
        } else {
            dir.join(&rel)
        };
        let entries = fs::read_dir(&at).map_err(|e| format!("reading {}: {e}", at.display()))?;
        for e in entries {
            let e = e.map_err(|e| format!("reading {}: {e}", at.display()))?;
            seen += 1;
            if seen > MAX_ENTRIES {
                return Err(format!(
                    "{} holds more than {MAX_ENTRIES} entries: not an arcwright output folder",
                    dir.display()
                ));
            }
            let name = e.file_name().to_string_lossy().into_owned();
            let path = if rel.is_empty() {
                name
            } else {
                format!("{rel}/{name}")
            };
            // The entry's own type: DirEntry::file_type does not follow links.
            let kind = e
                .file_type()
                .map_err(|err| format!("reading {}: {err}", e.path().display()))?;
            if kind.is_dir() {
                if BUILD_ARTEFACTS.contains(&format!("{path}/").as_str()) {
                    listing.artefacts.push(format!("{path}/"));
                } else {
                    stack.push(path);
                }
            } else if kind.is_file() {
                if BUILD_ARTEFACTS.contains(&path.as_str()) {
                    listing.artefacts.push(path);
                } else {
                    listing.files.push(path);
                }
            } else {
                let what = if kind.is_symlink() {
                    "a symbolic link"
                } else {
                    "neither a file nor a folder"
                };
                listing.others.push((path, what));
            }
        }
    }
    listing.files.sort();
    listing.artefacts.sort();
    listing.others.sort();
    Ok(listing)
}

#[cfg(all(test, unix))]
mod tests {
    use super::*;
    use std::os::unix::fs::symlink;

    #[test]
    fn links_are_listed_not_followed() {
        let t = tempfile::tempdir().unwrap();
        let d = t.path();
        fs::create_dir_all(d.join("sub")).unwrap();
        fs::write(d.join("sub/a.txt"), "a").unwrap();
        symlink("/", d.join("rootlink")).unwrap();
        symlink("..", d.join("sub/up")).unwrap();
        fs::create_dir_all(d.join("rust/target/debug")).unwrap();
        fs::write(d.join("rust/target/debug/x"), "x").unwrap();
        fs::write(d.join("rust/Cargo.lock"), "").unwrap();
        let l = walk(d).unwrap();
        assert_eq!(l.files, vec!["sub/a.txt"]);
        assert_eq!(l.artefacts, vec!["rust/Cargo.lock", "rust/target/"]);
        assert_eq!(
            l.others,
            vec![
                ("rootlink".to_string(), "a symbolic link"),
                ("sub/up".to_string(), "a symbolic link")
            ]
        );
    }

    #[test]
    fn a_huge_folder_ends_the_walk() {
        let t = tempfile::tempdir().unwrap();
        for i in 0..=MAX_ENTRIES {
            fs::write(t.path().join(format!("f{i}")), "").unwrap();
        }
        let e = walk(t.path()).unwrap_err();
        assert!(e.contains("more than"), "{e}");
    }
}

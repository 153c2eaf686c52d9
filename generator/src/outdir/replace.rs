//! Putting a generated tree in place so that nothing of the user's is ever lost.
//!
//! - An existing folder is replaced only when its marker is one arcwright wrote and
//!   every file in it is one that marker lists, unedited (build products of the shipped
//!   tests excepted). Anything else is listed and nothing is touched.
//! - The new tree is written beside the destination, every file and folder synced,
//!   the marker last, and then exchanged with the old one in one atomic step
//!   (`renameat2(RENAME_EXCHANGE)` on Linux), so the destination exists at every
//!   instant and holds either the old tree or the complete new one. Where the exchange
//!   is unsupported, two renames; a run killed between them is recovered by the next.
//! - Runs into the same parent folder take turns through a lock on that folder, and
//!   each run first clears (or recovers from) what a killed run left beside it.
//!
//! Staging folders are named `.arcwright-new-XXXXXX-TAG` and `.arcwright-old-XXXXXX-TAG`,
//! with TAG derived from the destination's name, so a run recognises its own leftovers.

use super::{compare, read_marker, Difference};
use crate::emit::marker::{sha256_hex, MARKER};
use crate::emit::OutFile;
use std::collections::BTreeSet;
use std::fs::{self, File};
use std::io::Write as _;
use std::path::{Path, PathBuf};

const NEW_PREFIX: &str = ".arcwright-new-";
const OLD_PREFIX: &str = ".arcwright-old-";
/// Length of the random part of a staging folder's name.
const RANDOM_LEN: usize = 6;
/// Most problems a refusal lists one by one.
const LISTED: usize = 20;

/// Where a run stops early, for tests of what a killed run leaves behind.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum StopAt {
    /// Never: the whole replacement.
    Nowhere,
    /// The new tree is staged and synced; the destination is untouched.
    Staged,
    /// Two-rename path only: the old tree is moved aside, the new one not yet in.
    MovedAside,
}

/// Writes `files` as the folder `dir`, replacing an earlier output of arcwright there.
/// `waiting` is called once if another run holds the lock and this one waits for it.
pub fn write_tree(dir: &Path, files: &[OutFile], waiting: &dyn Fn(&Path)) -> Result<(), String> {
    write_tree_until(dir, files, waiting, StopAt::Nowhere, true)
}

/// [`write_tree`], stopping at `stop` and optionally without the atomic exchange (so
/// that tests reach the two-rename path and what a kill inside it leaves).
pub fn write_tree_until(
    dir: &Path,
    files: &[OutFile],
    waiting: &dyn Fn(&Path),
    stop: StopAt,
    exchange: bool,
) -> Result<(), String> {
    let name = dir
        .file_name()
        .ok_or_else(|| format!("{}: not a folder name", dir.display()))?;
    let parent = match dir.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    };
    fs::create_dir_all(&parent).map_err(|e| format!("creating {}: {e}", parent.display()))?;
    let _lock = lock(&parent, waiting)?;
    let tag = tag_of(&name.to_string_lossy());
    recover(&parent, dir, &tag)?;

    preflight(dir)?;
    let exists = dir.exists();
    if exists {
        check_replaceable(dir, files)?;
    }

    let staged = stage(&parent, &tag, files)?;
    if stop == StopAt::Staged {
        return Ok(());
    }
    if !exists {
        fs::rename(&staged, dir).map_err(|e| {
            let _ = fs::remove_dir_all(&staged);
            format!("moving the new tree into {}: {e}", dir.display())
        })?;
    } else if !(exchange && exchanged(&staged, dir)?) {
        let old = parent.join(format!("{OLD_PREFIX}{}-{tag}", random_part()));
        fs::rename(dir, &old).map_err(|e| {
            let _ = fs::remove_dir_all(&staged);
            format!("moving the old {} aside: {e}", dir.display())
        })?;
        if stop == StopAt::MovedAside {
            return Ok(());
        }
        if let Err(e) = fs::rename(&staged, dir) {
            let _ = fs::rename(&old, dir);
            let _ = fs::remove_dir_all(&staged);
            return Err(format!("moving the new tree into {}: {e}", dir.display()));
        }
        sync_dir(&parent)?;
        fs::remove_dir_all(&old).map_err(|e| format!("removing {}: {e}", old.display()))?;
    } else {
        // `staged` now holds the old tree.
        sync_dir(&parent)?;
        fs::remove_dir_all(&staged).map_err(|e| format!("removing {}: {e}", staged.display()))?;
    }
    sync_dir(&parent)
}

/// The checks on `dir` that need no generated files: it is absent, an empty folder, or
/// a folder whose marker arcwright wrote (not a link, not a file). `generate` runs them
/// before deriving, so a wrong `--out` fails at once; [`write_tree`] repeats them.
pub fn preflight(dir: &Path) -> Result<(), String> {
    match fs::symlink_metadata(dir) {
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(()),
        Err(e) => Err(format!("reading {}: {e}", dir.display())),
        Ok(m) if m.file_type().is_symlink() => Err(format!(
            "{} is a symbolic link; give the folder it points to, or another --out",
            dir.display()
        )),
        Ok(m) if !m.is_dir() => Err(format!(
            "{} exists and is not a folder; refusing to replace it",
            dir.display()
        )),
        Ok(_) => {
            let empty = fs::read_dir(dir)
                .map_err(|e| format!("reading {}: {e}", dir.display()))?
                .next()
                .is_none();
            if empty || read_marker(dir).is_some() {
                Ok(())
            } else {
                Err(format!(
                    "{} exists and is not an arcwright output folder (no {MARKER} file that \
                     arcwright wrote); refusing to replace it. Choose another --out, or empty \
                     the folder first",
                    dir.display()
                ))
            }
        }
    }
}

/// Refuses to replace `dir` (which passed [`preflight`]) unless arcwright wrote
/// everything in it: every file must be listed in its marker and unedited (see
/// [`compare`]). An empty folder may be replaced.
fn check_replaceable(dir: &Path, files: &[OutFile]) -> Result<(), String> {
    if read_marker(dir).is_none() {
        return Ok(()); // an empty folder (preflight refused any other)
    }
    let problems: Vec<Difference> = compare(dir, files)?
        .into_iter()
        .filter(|d| matches!(d, Difference::Foreign(..)))
        .collect();
    if problems.is_empty() {
        return Ok(());
    }
    let mut msg = format!(
        "{} holds {} entr{} that arcwright did not write or that changed since; refusing to \
         replace it (arcwright deletes only its own files). Move them out and run again:",
        dir.display(),
        problems.len(),
        if problems.len() == 1 { "y" } else { "ies" }
    );
    for p in problems.iter().take(LISTED) {
        msg.push_str(&format!("\n  {p}"));
    }
    if problems.len() > LISTED {
        msg.push_str(&format!("\n  … and {} more", problems.len() - LISTED));
    }
    Err(msg)
}

/// Writes the tree into a fresh staging folder beside the destination, marker last,
/// every file and folder synced; returns its path.
fn stage(parent: &Path, tag: &str, files: &[OutFile]) -> Result<PathBuf, String> {
    let tmp = tempfile::Builder::new()
        .prefix(NEW_PREFIX)
        .rand_bytes(RANDOM_LEN)
        .suffix(&format!("-{tag}"))
        .tempdir_in(parent)
        .map_err(|e| format!("creating a staging folder in {}: {e}", parent.display()))?;
    let root = tmp.path().to_path_buf();
    let mut folders = BTreeSet::new();
    let (marker_files, rest): (Vec<&OutFile>, Vec<&OutFile>) =
        files.iter().partition(|(p, _)| p == MARKER);
    for (rel, text) in rest.into_iter().chain(marker_files) {
        let path = root.join(rel);
        if let Some(p) = path.parent() {
            fs::create_dir_all(p).map_err(|e| format!("creating {}: {e}", p.display()))?;
            folders.insert(p.to_path_buf());
        }
        let mut f = File::create(&path).map_err(|e| format!("writing {}: {e}", path.display()))?;
        f.write_all(text.as_bytes())
            .and_then(|()| f.sync_all())
            .map_err(|e| format!("writing {}: {e}", path.display()))?;
    }
    // Deepest first, so that each folder's entry in its parent is synced after it.
    for d in folders.iter().rev() {
        sync_dir(d)?;
    }
    sync_dir(parent)?;
    Ok(tmp.keep())
}

/// Swaps `a` and `b` atomically; `Ok(false)` where the system or file system cannot.
#[cfg(target_os = "linux")]
fn exchanged(a: &Path, b: &Path) -> Result<bool, String> {
    use rustix::fs::{renameat_with, RenameFlags, CWD};
    use rustix::io::Errno;
    match renameat_with(CWD, a, CWD, b, RenameFlags::EXCHANGE) {
        Ok(()) => Ok(true),
        Err(Errno::INVAL | Errno::NOSYS | Errno::OPNOTSUPP) => Ok(false),
        Err(e) => {
            let _ = fs::remove_dir_all(a);
            Err(format!("replacing {}: {e}", b.display()))
        }
    }
}

#[cfg(not(target_os = "linux"))]
fn exchanged(_a: &Path, _b: &Path) -> Result<bool, String> {
    Ok(false)
}

/// Clears what killed runs left for this destination. If the destination is missing
/// (a run killed between its two renames), the complete new tree goes in, or else the
/// old one back; every other staging folder of this destination is removed.
fn recover(parent: &Path, dir: &Path, tag: &str) -> Result<(), String> {
    let mut new = Vec::new();
    let mut old = Vec::new();
    let entries = fs::read_dir(parent).map_err(|e| format!("reading {}: {e}", parent.display()))?;
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().into_owned();
        let is_dir = e.file_type().is_ok_and(|t| t.is_dir());
        if !is_dir {
            continue;
        }
        if staging_tag(&name, NEW_PREFIX) == Some(tag) {
            new.push(e.path());
        } else if staging_tag(&name, OLD_PREFIX) == Some(tag) {
            old.push(e.path());
        }
    }
    if fs::symlink_metadata(dir).is_err() {
        // The marker is written last and synced: a staged tree with one is complete.
        let complete = new.iter().position(|p| p.join(MARKER).is_file());
        let back = match complete {
            Some(i) => Some(new.remove(i)),
            None if !old.is_empty() => Some(old.remove(0)),
            None => None,
        };
        if let Some(from) = back {
            fs::rename(&from, dir).map_err(|e| {
                format!("recovering {} from {}: {e}", dir.display(), from.display())
            })?;
            sync_dir(parent)?;
        }
    }
    for p in new.iter().chain(&old) {
        fs::remove_dir_all(p).map_err(|e| format!("removing {}: {e}", p.display()))?;
    }
    Ok(())
}

/// The destination tag of a staging folder's name, if it is one.
fn staging_tag<'a>(name: &'a str, prefix: &str) -> Option<&'a str> {
    let rest = name.strip_prefix(prefix)?;
    let (random, tag) = rest.split_at_checked(RANDOM_LEN)?;
    (random.bytes().all(|b| b.is_ascii_alphanumeric())).then_some(())?;
    tag.strip_prefix('-')
}

/// A short tag for the destination's name: fixed length, whatever the name.
fn tag_of(name: &str) -> String {
    sha256_hex(name.as_bytes())[..12].to_string()
}

fn random_part() -> String {
    use rand::distributions::{Alphanumeric, DistString};
    Alphanumeric.sample_string(&mut rand::thread_rng(), RANDOM_LEN)
}

/// Holds the parent folder's lock while alive (released when the file is closed).
struct Lock(#[allow(dead_code)] Option<File>);

/// Locks `parent` against other arcwright runs writing into it, waiting if need be.
fn lock(parent: &Path, waiting: &dyn Fn(&Path)) -> Result<Lock, String> {
    #[cfg(unix)]
    {
        let f = File::open(parent).map_err(|e| format!("opening {}: {e}", parent.display()))?;
        match f.try_lock() {
            Ok(()) => {}
            Err(fs::TryLockError::WouldBlock) => {
                waiting(parent);
                f.lock()
                    .map_err(|e| format!("locking {}: {e}", parent.display()))?;
            }
            Err(fs::TryLockError::Error(e)) => {
                return Err(format!("locking {}: {e}", parent.display()))
            }
        }
        Ok(Lock(Some(f)))
    }
    #[cfg(not(unix))]
    {
        let _ = (parent, waiting);
        Ok(Lock(None))
    }
}

/// Makes a folder's entries durable (a no-op where folders cannot be opened).
fn sync_dir(dir: &Path) -> Result<(), String> {
    #[cfg(unix)]
    {
        File::open(dir)
            .and_then(|f| f.sync_all())
            .map_err(|e| format!("syncing {}: {e}", dir.display()))
    }
    #[cfg(not(unix))]
    {
        let _ = dir;
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::emit::{Meta, Options};

    fn tree(body: &str) -> Vec<OutFile> {
        let mut files: Vec<OutFile> = vec![
            ("arm.toml".into(), "name = \"x\"\n".into()),
            ("c/x.c".into(), body.into()),
        ];
        let m = crate::emit::marker::text(&Meta::new("x", 1), &Options::default(), &files);
        files.push((MARKER.into(), m));
        files.sort();
        files
    }

    fn read(dir: &Path) -> String {
        fs::read_to_string(dir.join("c/x.c")).unwrap()
    }

    fn leftovers(parent: &Path) -> Vec<String> {
        fs::read_dir(parent)
            .unwrap()
            .flatten()
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with(".arcwright-"))
            .collect()
    }

    fn quiet(_: &Path) {}

    #[test]
    fn a_folder_with_a_bare_marker_is_not_ours() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("c");
        fs::create_dir(&out).unwrap();
        fs::write(out.join(MARKER), "").unwrap();
        fs::write(out.join("thesis.tex"), "x").unwrap();
        let e = write_tree(&out, &tree("1"), &quiet).unwrap_err();
        assert!(e.contains("not an arcwright output folder"), "{e}");
        assert_eq!(fs::read_to_string(out.join("thesis.tex")).unwrap(), "x");
        assert!(leftovers(t.path()).is_empty());
    }

    #[test]
    fn foreign_and_edited_files_are_listed_and_kept() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("out");
        write_tree(&out, &tree("1"), &quiet).unwrap();
        fs::write(out.join("c/notes.txt"), "mine").unwrap();
        fs::write(out.join("c/x.c"), "edited").unwrap();
        let e = write_tree(&out, &tree("2"), &quiet).unwrap_err();
        assert!(e.contains("c/notes.txt (not written by arcwright)"), "{e}");
        assert!(e.contains("c/x.c (edited since arcwright wrote it)"), "{e}");
        assert!(e.contains("2 entries"), "{e}");
        assert_eq!(read(&out), "edited");
        fs::remove_file(out.join("c/notes.txt")).unwrap();
        fs::remove_file(out.join("c/x.c")).unwrap();
        write_tree(&out, &tree("2"), &quiet).unwrap();
        assert_eq!(read(&out), "2");
    }

    #[test]
    fn build_products_go_with_the_old_tree() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("out");
        write_tree(&out, &tree("1"), &quiet).unwrap();
        fs::create_dir_all(out.join("rust/target/debug")).unwrap();
        fs::write(out.join("rust/Cargo.lock"), "").unwrap();
        fs::create_dir_all(out.join("python/__pycache__")).unwrap();
        write_tree(&out, &tree("2"), &quiet).unwrap();
        assert_eq!(read(&out), "2");
        assert!(!out.join("rust").exists() && !out.join("python").exists());
    }

    #[cfg(unix)]
    #[test]
    fn links_are_never_followed_nor_replaced() {
        use std::os::unix::fs::symlink;
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("out");
        write_tree(&out, &tree("1"), &quiet).unwrap();
        symlink("/", out.join("rootlink")).unwrap();
        let e = write_tree(&out, &tree("2"), &quiet).unwrap_err();
        assert!(e.contains("rootlink (a symbolic link)"), "{e}");
        fs::remove_file(out.join("rootlink")).unwrap();
        let link = t.path().join("link");
        symlink(&out, &link).unwrap();
        let e = write_tree(&link, &tree("2"), &quiet).unwrap_err();
        assert!(e.contains("symbolic link"), "{e}");
        assert_eq!(read(&out), "1");
    }

    #[test]
    fn a_run_killed_after_staging_leaves_the_old_tree_and_is_cleaned_up() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("out");
        write_tree(&out, &tree("1"), &quiet).unwrap();
        write_tree_until(&out, &tree("2"), &quiet, StopAt::Staged, true).unwrap();
        assert_eq!(read(&out), "1");
        assert_eq!(leftovers(t.path()).len(), 1);
        write_tree(&out, &tree("3"), &quiet).unwrap();
        assert_eq!(read(&out), "3");
        assert!(leftovers(t.path()).is_empty());
    }

    #[test]
    fn a_run_killed_between_the_two_renames_is_recovered() {
        let t = tempfile::tempdir().unwrap();
        let out = t.path().join("out");
        write_tree(&out, &tree("1"), &quiet).unwrap();
        write_tree_until(&out, &tree("2"), &quiet, StopAt::MovedAside, false).unwrap();
        assert!(!out.exists(), "the kill point leaves no destination");
        assert_eq!(leftovers(t.path()).len(), 2);
        // The next run first puts the complete new tree in place, then replaces it.
        let other = t.path().join("other");
        write_tree(&other, &tree("9"), &quiet).unwrap();
        assert!(!out.exists(), "a run for another folder leaves these alone");
        write_tree_until(&out, &tree("3"), &quiet, StopAt::Staged, false).unwrap();
        assert_eq!(read(&out), "2", "recovered before anything else happened");
        write_tree_until(&out, &tree("4"), &quiet, StopAt::Nowhere, false).unwrap();
        assert_eq!(read(&out), "4");
        assert!(leftovers(t.path()).is_empty());
    }

    #[test]
    fn staging_names_carry_their_destination() {
        let tag = tag_of("out");
        assert_eq!(tag.len(), 12);
        let name = format!("{NEW_PREFIX}aB3xY9-{tag}");
        assert_eq!(staging_tag(&name, NEW_PREFIX), Some(tag.as_str()));
        assert_eq!(staging_tag(&name, OLD_PREFIX), None);
        assert_eq!(staging_tag(".arcwright-new-abc", NEW_PREFIX), None);
    }
}

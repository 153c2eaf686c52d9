//! The marker file at the top of every output folder: what makes a folder one that
//! arcwright may replace. It names the generator version, the arm file's SHA-256, the
//! generate options, and every file arcwright wrote with its SHA-256, so that a later
//! run can tell its own untouched files from files a user added or edited, and refuse
//! to delete the latter.

use super::{CStandard, Language, Languages, Meta, Options, OutFile, Precision};
use sha2::{Digest, Sha256};
use std::collections::BTreeMap;

/// Marker file at the top of every output folder.
pub const MARKER: &str = "ARCWRIGHT_OUTPUT";

const FIRST_LINE: &str = "This folder is written by arcwright ";
const OPTIONS_LINE: &str = "Generated with:";
const FILES_LINE: &str = "Files it wrote (SHA-256, path):";

/// What a marker says, as read back.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Record {
    pub version: String,
    pub arm_sha256: String,
    /// `None` for markers written before the options were recorded.
    pub options: Option<Options>,
    /// Path → SHA-256 of every file arcwright wrote (the marker excluded); `None` for
    /// markers written before the manifest was recorded.
    pub files: Option<BTreeMap<String, String>>,
}

/// SHA-256 of `bytes`, lower-case hex.
pub fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .map(|b| format!("{b:02x}"))
        .collect()
}

/// The marker's text for a folder holding `files` (the marker itself not among them).
pub fn text(meta: &Meta, options: &Options, files: &[OutFile]) -> String {
    let mut out = format!(
        "{FIRST_LINE}{} (arm file SHA-256 {}).\n\
         {OPTIONS_LINE} --precision {}{}{} --lang {}\n\
         `arcwright generate` replaces this folder as a whole, and refuses to while it holds\n\
         a file that is not listed below or that was edited since: keep your own files elsewhere.\n\
         \n\
         {FILES_LINE}\n",
        meta.version,
        meta.arm_sha256,
        match options.precision {
            Precision::F32 => "f32",
            Precision::F64 => "f64",
        },
        match options.c_standard {
            CStandard::C99 => "",
            CStandard::C90 => " --c-standard c90",
        },
        if options.optimised { " --optimise" } else { "" },
        options.languages.names().join(","),
    );
    for (path, body) in files {
        out.push_str(&format!("{}  {path}\n", sha256_hex(body.as_bytes())));
    }
    out
}

/// Reads a marker back; `None` when the text is not a marker arcwright wrote (an empty
/// file, a file of the user's that happens to carry the name).
pub fn parse(text: &str) -> Option<Record> {
    let mut lines = text.lines();
    let first = lines.next()?.strip_prefix(FIRST_LINE)?;
    let (version, rest) = first.split_once(" (arm file SHA-256 ")?;
    let arm_sha256 = rest.strip_suffix(").")?;
    if !is_sha(arm_sha256) || version.is_empty() || version.contains(char::is_whitespace) {
        return None;
    }
    let options = match text.lines().find_map(|l| l.strip_prefix(OPTIONS_LINE)) {
        None => None,
        Some(line) => Some(parse_options(line)?),
    };
    let files = match text.split_once(&format!("\n{FILES_LINE}\n")) {
        None => None,
        Some((_, list)) => {
            let mut map = BTreeMap::new();
            for line in list.lines() {
                let (sha, path) = line.split_once("  ")?;
                if !is_sha(sha) || path.is_empty() || path == MARKER {
                    return None;
                }
                map.insert(path.to_string(), sha.to_string());
            }
            Some(map)
        }
    };
    Some(Record {
        version: version.to_string(),
        arm_sha256: arm_sha256.to_string(),
        options,
        files,
    })
}

fn is_sha(s: &str) -> bool {
    s.len() == 64 && s.bytes().all(|b| b.is_ascii_hexdigit())
}

/// The options line after its label; `None` if it is malformed (the marker then is not
/// one arcwright wrote). Markers written before `--lang` was recorded hold all three.
fn parse_options(line: &str) -> Option<Options> {
    let words: Vec<&str> = line.split_whitespace().collect();
    let value = |flag: &str| words.windows(2).find(|w| w[0] == flag).map(|w| w[1]);
    let precision = match value("--precision")? {
        "f32" => Precision::F32,
        "f64" => Precision::F64,
        _ => return None,
    };
    let languages = match value("--lang") {
        None => Languages::ALL,
        Some(list) => {
            let mut set = Languages::NONE;
            for name in list.split(',') {
                set.insert(Language::from_name(name)?);
            }
            if set.is_empty() {
                return None;
            }
            set
        }
    };
    let c_standard = match value("--c-standard") {
        None | Some("c99") => CStandard::C99,
        Some("c90") => CStandard::C90,
        Some(_) => return None,
    };
    Some(Options {
        precision,
        c_standard,
        optimised: words.contains(&"--optimise"),
        languages,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn files() -> Vec<OutFile> {
        vec![
            ("arm.toml".into(), "name = \"x\"\n".into()),
            ("c/x.c".into(), "int x;\n".into()),
        ]
    }

    #[test]
    fn a_marker_reads_back_what_it_records() {
        let meta = Meta::new("name = \"x\"", 3);
        for precision in [Precision::F64, Precision::F32] {
            for (optimised, c_standard) in [(false, CStandard::C99), (true, CStandard::C90)] {
                for languages in [Languages::ALL, Languages::only(Language::C)] {
                    let o = Options {
                        precision,
                        c_standard,
                        optimised,
                        languages,
                    };
                    let r = parse(&text(&meta, &o, &files())).expect("a marker");
                    assert_eq!(r.options, Some(o));
                    assert_eq!(r.arm_sha256, meta.arm_sha256);
                    let manifest = r.files.expect("a manifest");
                    assert_eq!(manifest.len(), 2);
                    assert_eq!(manifest["c/x.c"], sha256_hex(b"int x;\n"));
                }
            }
        }
    }

    #[test]
    fn anything_else_is_not_a_marker() {
        for text in [
            "",
            "\n",
            "hello\n",
            "This folder is written by arcwright 0.1.0.\n",
            "This folder is written by arcwright 0.1.0 (arm file SHA-256 abc).\n",
        ] {
            assert_eq!(parse(text), None, "{text:?}");
        }
        let meta = Meta::new("x", 1);
        let good = text(&meta, &Options::default(), &files());
        assert_eq!(
            parse(&good.replace("--precision f64", "--precision f16")),
            None
        );
        assert_eq!(
            parse(&good.replace("--lang c,rust,python", "--lang c,go")),
            None
        );
        assert_eq!(parse(&format!("{good}not a manifest line\n")), None);
    }

    #[test]
    fn markers_of_earlier_versions_still_read() {
        // The marker format of the first releases: no --lang, no manifest.
        let sha = "0".repeat(64);
        let old = format!(
            "This folder is written by arcwright 0.1.0 (arm file SHA-256 {sha}).\n\
             Generated with: --precision f32\n\
             `arcwright generate` replaces it as a whole: do not keep other files here.\n"
        );
        let r = parse(&old).expect("an old marker");
        assert_eq!(r.files, None);
        let o = r.options.expect("options");
        assert_eq!(o.precision, Precision::F32);
        assert_eq!(o.languages, Languages::ALL);
        let oldest =
            format!("This folder is written by arcwright 0.1.0 (arm file SHA-256 {sha}).\n");
        assert_eq!(parse(&oldest).expect("the oldest marker").options, None);
    }
}

//! `arcwright new`: a commented starter arm file to edit.

use super::{progress, CliError};
use crate::arm::{check_name, parse_arm_str};
use clap::Args;
use std::path::{Path, PathBuf};

/// The starter file, with `{name}` and `{file}` to fill in.
const STARTER: &str = include_str!("starter_arm.toml");

/// Write a commented starter arm file (two tapered segments, tendons, a payload).
///
/// Every number in it is a placeholder to replace with your arm's; the comments say
/// what each field means and which units it takes. Refuses to overwrite an existing
/// file unless --force is given.
#[derive(Args, Debug)]
#[command(
    allow_negative_numbers = true,
    after_help = "Example:\n  arcwright new gripper_arm.toml\n  arcwright eval gripper_arm.toml --q \"2,0,3,0\""
)]
pub struct NewArgs {
    /// Where to write the file.
    #[arg(default_value = "arm.toml")]
    path: PathBuf,
    /// The arm's name (code prefix, [a-z][a-z0-9_]*); default: from the file name.
    #[arg(long)]
    name: Option<String>,
    /// Overwrite the file if it exists.
    #[arg(long)]
    force: bool,
}

/// A name from the file stem: lower case, other characters as `_`; an error (asking
/// for --name) when that is no valid arm name, never a silent stand-in.
fn name_from_path(path: &Path) -> Result<String, String> {
    let stem = path.file_stem().and_then(|s| s.to_str()).unwrap_or("");
    let name: String = stem
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() {
                c.to_ascii_lowercase()
            } else {
                '_'
            }
        })
        .collect();
    check_name(&name).map(|()| name.clone()).map_err(|why| {
        format!(
            "the file name {} gives the arm name `{name}`, which cannot be used (the name {why}); \
             pass --name NAME",
            path.display(),
        )
    })
}

/// The starter text for `name`, mentioning `file` in its usage hints.
pub(crate) fn starter_text(name: &str, file: &str) -> String {
    STARTER.replace("{name}", name).replace("{file}", file)
}

pub fn run(args: &NewArgs) -> Result<(), CliError> {
    let name = match &args.name {
        Some(n) => {
            check_name(n).map_err(|why| CliError::Input(format!("--name: {why}")))?;
            n.clone()
        }
        None => name_from_path(&args.path).map_err(CliError::Input)?,
    };
    if args.path.exists() && !args.force {
        return Err(CliError::Input(format!(
            "{} already exists; pass --force to overwrite it",
            args.path.display()
        )));
    }
    let file = args.path.display().to_string();
    let file_hint = if file.contains(' ') {
        format!("\"{file}\"")
    } else {
        file.clone()
    };
    let text = starter_text(&name, &file_hint);
    // The starter must be a valid arm: check before writing anything.
    parse_arm_str(&text, &file).map_err(|e| {
        CliError::Failed(format!("internal error: the starter arm is invalid: {e}"))
    })?;
    if let Some(dir) = args.path.parent().filter(|d| !d.as_os_str().is_empty()) {
        std::fs::create_dir_all(dir)
            .map_err(|e| CliError::Input(format!("creating {}: {e}", dir.display())))?;
    }
    std::fs::write(&args.path, text)
        .map_err(|e| CliError::Input(format!("writing {file}: {e}")))?;
    progress::wrote(&args.path);
    progress::note(&format!("edit it, then try: arcwright report {file_hint}"));
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::derive::derive;
    use crate::evaluate::Evaluator;

    #[test]
    fn starter_parses_derives_and_sags_under_gravity() {
        let arm = parse_arm_str(&starter_text("starter", "arm.toml"), "arm.toml").unwrap();
        assert_eq!(arm.name, "starter");
        assert_eq!(arm.n_coords(), 4);
        assert_eq!(arm.n_inputs(), 3);
        assert_eq!(arm.sampling_or_default().extra_bending, 0.5);
        assert_eq!(arm.expansion_order, 4);
        let model = derive(&arm);
        let t = Evaluator::new(&model).terms(&[0.0; 4], &[0.0; 4]);
        // Horizontal arm: gravity pulls the curvature negative, so G is positive.
        assert!(t.g[0] > 0.0, "{:?}", t.g);
        assert!(t.b[0][0] > 0.0);
    }

    #[test]
    fn names_from_paths() {
        assert_eq!(
            name_from_path(Path::new("dir/Gripper-Arm.toml")).unwrap(),
            "gripper_arm"
        );
        assert_eq!(name_from_path(Path::new("arm.toml")).unwrap(), "arm");
        let e = name_from_path(Path::new("123.toml")).unwrap_err();
        assert!(e.contains("`123`") && e.contains("--name"), "{e}");
        let e = name_from_path(Path::new("numpy.toml")).unwrap_err();
        assert!(e.contains("Python module") && e.contains("--name"), "{e}");
    }
}

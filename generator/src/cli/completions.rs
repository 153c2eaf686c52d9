//! `arcwright completions`: a shell completion script on standard output.

use super::{Cli, CliError};
use clap::{Args, CommandFactory};
use clap_complete::Shell;

/// Print a completion script for a shell to standard output.
///
/// Load it in the shell's startup file or install it where the shell looks for
/// completions (see README.md).
#[derive(Args, Debug)]
#[command(
    after_help = "Examples:\n  arcwright completions bash > ~/.local/share/bash-completion/completions/arcwright\n  \
                        arcwright completions zsh > ~/.zfunc/_arcwright\n  \
                        arcwright completions fish > ~/.config/fish/completions/arcwright.fish"
)]
pub struct CompletionsArgs {
    /// Shell to write the script for.
    #[arg(value_enum)]
    shell: Shell,
}

pub fn run(args: &CompletionsArgs) -> Result<(), CliError> {
    let mut cmd = Cli::command();
    let mut buf = Vec::new();
    clap_complete::generate(args.shell, &mut cmd, "arcwright", &mut buf);
    let text = String::from_utf8(buf)
        .map_err(|e| CliError::Failed(format!("completion script is not UTF-8: {e}")))?;
    super::print_stdout(&text)
}

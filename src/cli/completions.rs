//! `geofold completions SHELL`: shell completions generated from the
//! command-line definition (clap_complete).

use clap::{Args, CommandFactory};
use clap_complete::Shell;

use crate::error::Error;

/// `geofold completions`.
#[derive(Debug, Clone, Args)]
#[command(after_long_help = "\
EXAMPLES
  geofold completions bash > /etc/bash_completion.d/geofold
  geofold completions zsh > \"${fpath[1]}/_geofold\"
  geofold completions fish > ~/.config/fish/completions/geofold.fish")]
pub struct CompletionsArgs {
    /// The shell.
    #[arg(value_enum, value_name = "SHELL")]
    pub shell: Shell,
}

/// Writes the completion script to stdout.
///
/// # Errors
/// Never: a closed pipe is not a failure.
pub fn run(args: &CompletionsArgs) -> Result<(), Error> {
    let mut command = super::Cli::command();
    let mut out = std::io::stdout().lock();
    clap_complete::generate(args.shell, &mut command, "geofold", &mut out);
    Ok(())
}

//! The `latens` command: parse the arguments, run, map the outcome to an exit code.

use std::process::ExitCode;

mod cli;

fn main() -> ExitCode {
    cli::main_with_args(std::env::args_os())
}

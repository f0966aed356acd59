//! The `latens` command: parse the arguments, run, map the outcome to an exit code.

use std::process::ExitCode;

fn main() -> ExitCode {
    latens::cli::main_with_args(std::env::args_os())
}

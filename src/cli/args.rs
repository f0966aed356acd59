//! Command-line arguments as clap structures.

use std::path::PathBuf;

use clap::{Parser, Subcommand};

/// Latens: does the drift of a tracked body's orbit betray an unseen mass, and
/// where should a telescope look for it?
#[derive(Debug, Parser)]
#[command(name = "latens", version, about, long_about = None)]
pub struct Args {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the built-in invented scenario end to end and write what it makes.
    Demo(DemoArgs),
}

#[derive(Debug, clap::Args)]
pub struct DemoArgs {
    /// Directory to write into (created if missing).
    #[arg(long, value_name = "DIR", default_value = "output/demo")]
    pub out: PathBuf,
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn demo_takes_an_output_directory() {
        let a = Args::try_parse_from(["latens", "demo", "--out", "x/y"]).unwrap();
        let Command::Demo(d) = a.command;
        assert_eq!(d.out, PathBuf::from("x/y"));
        let a = Args::try_parse_from(["latens", "demo"]).unwrap();
        let Command::Demo(d) = a.command;
        assert_eq!(d.out, PathBuf::from("output/demo"));
    }

    #[test]
    fn unknown_subcommands_are_refused() {
        assert!(Args::try_parse_from(["latens", "frobnicate"]).is_err());
    }

    #[test]
    fn clap_definition_is_consistent() {
        use clap::CommandFactory;
        Args::command().debug_assert();
    }
}

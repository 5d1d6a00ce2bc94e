//! The `hopmap` command line. Each command is a thin layer: parse options, call the library,
//! hand the result to a renderer. Data go to stdout, messages to stderr; exit code 1 means the
//! analysis failed, 2 a usage error (clap's own convention).

mod cli;

use std::process::ExitCode;

fn main() -> ExitCode {
    cli::run()
}

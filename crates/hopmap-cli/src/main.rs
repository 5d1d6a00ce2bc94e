//! The `hopmap` command line. Data go to stdout, messages to stderr; exit code 1 means the
//! analysis failed, 2 a usage error (clap's own convention).

use std::process::ExitCode;

fn main() -> ExitCode {
    hopmap_cli::cli::run()
}

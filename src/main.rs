//! restvolt's binary: parse the command line, run, map the outcome to a message and an exit code.

use std::process::ExitCode;

fn main() -> ExitCode {
    restvolt::cli::main_with_args(std::env::args_os())
}

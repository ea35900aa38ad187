//! The knotwise binary: parse the command line, run the command, map errors to exit codes.

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = match knotwise::cli::Cli::try_parse() {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return ExitCode::from(if e.use_stderr() { knotwise::error::EXIT_INPUT } else { 0 });
        }
    };
    match knotwise::app::execute(cli.command) {
        Ok(code) => ExitCode::from(code),
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(e.exit_code())
        }
    }
}

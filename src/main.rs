//! The `thiomap` command. Kept thin: parse, run, report one error chain, exit with a
//! documented code — 0 success, 1 finished but some inputs failed, 2 usage or input error.

mod cli;

use std::process::ExitCode;

fn main() -> ExitCode {
    match cli::run() {
        Ok(code) => code,
        Err(err) => {
            eprintln!("thiomap: {err:#}");
            ExitCode::from(2)
        }
    }
}

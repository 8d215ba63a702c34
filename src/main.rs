//! The `symtrust` command line: parses flags, opens the site, calls the library
//! crates and maps their errors to exit codes. No algorithm lives here.

mod cli;
mod cmd;
mod context;
mod exit;
mod sweep;

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = match cli::Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() {
                exit::BAD_INPUT
            } else {
                exit::OK
            };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    let ctx = context::Ctx::new(&cli.global);
    match cli::dispatch(&ctx, cli.command) {
        Ok(code) => ExitCode::from(code),
        Err(err) => {
            eprintln!("error: {err:#}");
            ExitCode::from(exit::code_for(&err))
        }
    }
}

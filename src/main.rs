//! The `regulus` binary: parse arguments, dispatch to a command, print the error chain once,
//! and map the outcome to an exit code. Nothing else lives here.

use clap::Parser;
use std::process::ExitCode;

fn main() -> ExitCode {
    let cli = regulus::cli::Cli::parse();
    match regulus::cli::dispatch(cli) {
        Ok(code) => ExitCode::from(code),
        Err(err) => {
            // A closed pipe (`regulus design x | head`) is not an error worth reporting.
            let broken_pipe = err.chain().any(|c| {
                c.downcast_ref::<std::io::Error>()
                    .is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe)
            });
            if broken_pipe {
                return ExitCode::SUCCESS;
            }
            let code = regulus::cli::exit_code_for(&err);
            eprintln!("error: {err}");
            // Print each cause once: skip a cause whose text the line above already holds
            // (errors that show their source in their own message).
            let mut shown = err.to_string();
            for cause in err.chain().skip(1) {
                let text = cause.to_string();
                if !shown.contains(&text) {
                    eprintln!("  caused by: {text}");
                }
                shown = text;
            }
            ExitCode::from(code)
        }
    }
}

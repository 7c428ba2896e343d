//! The `gridscope` command: opens the inspector window, or runs a batch command.
//!
//! Thin by design: parse the command line, dispatch, and turn errors into the contract's exit
//! status (0 success, 2 input refused, 1 any other failure).

use gridscope::commands::{self, Command, OpenArgs};
use std::process::ExitCode;

fn main() -> ExitCode {
    gridscope::grid::keep_freed_buffers();
    let cli = match commands::parse(std::env::args_os()) {
        Ok(cli) => cli,
        Err(e) => e.exit(),
    };
    let result = match cli.command {
        Some(Command::Open(args)) => open_window(args),
        None => open_window(OpenArgs {
            file: cli.file,
            params: cli.params,
        }),
        Some(command) => commands::run(command, &mut std::io::stdout().lock()),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("gridscope: {e}");
            ExitCode::from(if e.is_refusal() { 2 } else { 1 })
        }
    }
}

/// Runs the window until it closes. The files named are checked first, so a missing file is
/// reported as such (exit 2) rather than as a window that could not open.
fn open_window(args: OpenArgs) -> Result<(), gridscope::Error> {
    for path in [&args.file, &args.params].into_iter().flatten() {
        let demo = path.to_str().is_some_and(|s| s.starts_with("demo:"));
        if !demo && let Err(e) = std::fs::metadata(path) {
            return Err(gridscope::InputError::new(
                path.display().to_string(),
                gridscope::Problem::Read(e),
            )
            .into());
        }
    }
    gridscope::app::run(gridscope::app::Launch {
        session: args.file,
        params: args.params,
    })
    .map_err(gridscope::Error::Window)
}

//! The `slotwise` command: `slotwise --help` lists what it does.

use clap::Parser;

fn main() -> std::process::ExitCode {
    let cli = slotwise_sim::cli::Cli::parse();
    match slotwise_sim::cli::run(cli) {
        Ok(()) => std::process::ExitCode::SUCCESS,
        // A reader that stopped reading (`slotwise inspect FILE | head`) is not a failure.
        Err(e)
            if e.downcast_ref::<std::io::Error>()
                .is_some_and(|e| e.kind() == std::io::ErrorKind::BrokenPipe) =>
        {
            std::process::ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("slotwise: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}

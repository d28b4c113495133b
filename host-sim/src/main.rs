//! The `slotwise` command: `slotwise --help` lists what it does.

use clap::Parser;

fn main() -> std::process::ExitCode {
    let cli = slotwise_sim::cli::Cli::parse();
    match slotwise_sim::cli::run(cli) {
        Ok(()) => std::process::ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("slotwise: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}

//! Runs the clock-recovery benchmark until `slotwise bench sync` is wired into the command line:
//! `cargo run --release -p slotwise-sim --example bench_sync -- [--quick] [--json] ...`.

use clap::Parser;
use slotwise_sim::bench_sync::{self, BenchSyncArgs};

/// The benchmark's options, as the subcommand will take them.
#[derive(Parser, Debug)]
struct Cli {
    #[command(flatten)]
    args: BenchSyncArgs,
}

fn main() -> std::process::ExitCode {
    let cli = Cli::parse();
    match bench_sync::run(&cli.args) {
        Ok(r) if cli.args.json => match serde_json::to_string_pretty(&r) {
            Ok(s) => {
                println!("{s}");
                std::process::ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("bench_sync: {e}");
                std::process::ExitCode::FAILURE
            }
        },
        Ok(r) => {
            print!("{r}");
            std::process::ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("bench_sync: {e}");
            std::process::ExitCode::FAILURE
        }
    }
}

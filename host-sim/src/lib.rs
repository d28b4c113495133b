//! Host side of slotwise: a physical link simulator, the capture format, replay through the
//! firmware core, and the reports behind the `slotwise` command.
#![allow(missing_docs)]

pub mod bench_import;
pub mod bench_pipeline;
pub mod bench_sync;
pub mod board_blob;
pub mod capture;
pub mod cli;
pub mod clocks;
pub mod csv_io;
pub mod import;
pub mod keyrate;
pub mod link;
pub mod marker;
pub mod normal;
pub mod plots;
pub mod profile;
pub mod replay;
pub mod scenario;
pub mod setup;
pub mod sim;
pub mod stats;
#[cfg(feature = "proptest-strategies")]
pub mod strategies;
pub mod summary;
pub mod tomlcheck;
pub mod txrecord;

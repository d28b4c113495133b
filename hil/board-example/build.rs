//! Give the linker this board's memory map, and the defmt linker script when logging is on.
//!
//! The map is written as `memory.x` into this package's own `OUT_DIR` (cortex-m-rt's `link.x`
//! includes a file of that name from the search path), so it never meets the QEMU firmware's map.
use std::{env, fs, path::PathBuf};

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    if target.starts_with("thumb") {
        let out = PathBuf::from(env::var("OUT_DIR").unwrap_or_default());
        if let Err(e) = fs::write(out.join("memory.x"), include_bytes!("memory-stm32f411.x")) {
            panic!("cannot write memory.x into {}: {e}", out.display());
        }
        println!("cargo:rustc-link-search={}", out.display());
        if env::var_os("CARGO_FEATURE_DEFMT").is_some() {
            println!("cargo:rustc-link-arg-bins=-Tdefmt.x");
        }
    }
    println!("cargo:rerun-if-changed=memory-stm32f411.x");
    println!("cargo:rerun-if-changed=build.rs");
}

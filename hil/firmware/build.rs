//! Pick the memory map for the target and add the defmt linker script when logging is on.
use std::{env, fs, path::PathBuf};

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    let out = PathBuf::from(env::var("OUT_DIR").unwrap_or_default());
    let memory: &[u8] = if target.starts_with("thumb") {
        include_bytes!("memory-cortex-m.x")
    } else if target.starts_with("riscv32") {
        include_bytes!("memory-riscv.x")
    } else {
        b""
    };
    if !memory.is_empty() {
        if let Err(e) = fs::write(out.join("memory.x"), memory) {
            panic!("cannot write memory.x into {}: {e}", out.display());
        }
        println!("cargo:rustc-link-search={}", out.display());
    }
    if env::var_os("CARGO_FEATURE_DEFMT").is_some() {
        println!("cargo:rustc-link-arg=-Tdefmt.x");
    }
    println!("cargo:rerun-if-changed=memory-cortex-m.x");
    println!("cargo:rerun-if-changed=memory-riscv.x");
    println!("cargo:rerun-if-changed=build.rs");
}

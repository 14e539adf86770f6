//! Puts the memory map on the linker path and links with cortex-m-rt's `link.x`.
//!
//! The proof build uses `memory.x` (the nRF51 of QEMU `microbit`); the `stack-report` build uses
//! `memory-stack-report.x`, a roomier map for QEMU `mps2-an385`.

use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").unwrap_or_default());
    let source = if env::var_os("CARGO_FEATURE_STACK_REPORT").is_some() {
        "memory-stack-report.x"
    } else {
        "memory.x"
    };
    if let Err(e) = fs::copy(source, out.join("memory.x")) {
        eprintln!("glowcheck-nopanic: cannot copy {source}: {e}");
        std::process::exit(1);
    }
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=--nmagic");
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=memory-stack-report.x");
    println!("cargo:rerun-if-changed=build.rs");
}

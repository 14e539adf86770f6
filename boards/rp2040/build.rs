//! Puts the memory map on the linker path and links with cortex-m-rt's `link.x`.

use std::{env, fs, path::PathBuf};

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").unwrap_or_default());
    if let Err(e) = fs::copy("memory.x", out.join("memory.x")) {
        eprintln!("glowcheck-rp2040: cannot copy memory.x: {e}");
        std::process::exit(1);
    }
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=--nmagic");
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
}

//! Picks the QEMU machine's memory map from the compile target and links with cortex-m-rt's `link.x`.
//!
//! Each thumb target runs on exactly one QEMU machine here, so the target is the only switch:
//! thumbv6m → `microbit`, thumbv7m → `mps2-an385`, thumbv7em (hard float) → `mps2-an386`.

use std::{env, fs, path::PathBuf};

fn main() {
    let target = env::var("TARGET").unwrap_or_default();
    let machine = match target.as_str() {
        "thumbv6m-none-eabi" => "microbit",
        "thumbv7m-none-eabi" => "mps2-an385",
        "thumbv7em-none-eabihf" => "mps2-an386",
        other => {
            eprintln!(
                "glowcheck-qemu: no QEMU machine for target `{other}`; \
                 build with --target thumbv6m-none-eabi, thumbv7m-none-eabi or thumbv7em-none-eabihf"
            );
            std::process::exit(1);
        }
    };
    let out = PathBuf::from(env::var_os("OUT_DIR").unwrap_or_default());
    let source = format!("memory/{machine}.x");
    if let Err(e) = fs::copy(&source, out.join("memory.x")) {
        eprintln!("glowcheck-qemu: cannot copy {source}: {e}");
        std::process::exit(1);
    }
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rustc-link-arg-bins=--nmagic");
    println!("cargo:rustc-link-arg-bins=-Tlink.x");
    println!("cargo:rerun-if-changed={source}");
    println!("cargo:rerun-if-changed=build.rs");
}

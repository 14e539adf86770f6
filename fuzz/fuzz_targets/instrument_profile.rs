//! Instrument and tube-profile TOML: never a panic; an accepted instrument yields a lib map and a
//! configuration lib accepts (the file checks promise what lib needs).
#![no_main]
use libfuzzer_sys::fuzz_target;

#[path = "../../host-sim/src/excerpt.rs"]
mod excerpt;
#[allow(dead_code)]
#[path = "../../host-sim/src/instrument.rs"]
mod instrument;
#[allow(dead_code)]
#[path = "../../host-sim/src/map_convert.rs"]
mod map_convert;
#[allow(dead_code)]
#[path = "../../host-sim/src/profile_file.rs"]
mod profile_file;
#[allow(dead_code)]
#[path = "../../host-sim/src/toml_keys.rs"]
mod toml_keys;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    if let Ok(inst) = instrument::Instrument::parse(text) {
        let _ = inst.full_scale_counts();
        let _ = inst.lib_map();
        let _ = inst.stored_map();
    }
    if let Ok((_, p)) = profile_file::parse_profile(text) {
        assert!(
            p.primary().is_some(),
            "an accepted profile has a primary species"
        );
    }
});

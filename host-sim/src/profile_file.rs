//! Tube profiles on the host: a bundled name or a TOML file with the fields of lib's `TubeProfile`.
//!
//! # Format (TOML)
//!
//! ```toml
//! name = "my deuterium lamp"            # optional
//!
//! [[species]]                           # 1 to 3 entries; the first is the primary species
//! nucleus = "D"                         # H, D, T, He3, He4, Li6, Li7, Be9, B11, C12, N14, O16
//! share = [0.90, 1.00]                  # smallest and largest share of its element's line light
//!                                       # (fractions, 0.001 steps; a minimum of 0 makes it optional)
//! [[species]]
//! nucleus = "H"
//! share = [0.0, 0.10]
//!
//! [rules]                               # optional; defaults are those of the bundled profiles
//! min_lines = 3                         # fewest matched lines of the expected species
//! max_line_error_nm = 0.05              # largest |measured − predicted| of a line
//! max_unexplained_fraction = 0.05       # largest share of peak area in unexplained peaks
//! min_snr = 20                          # the strongest matched line must reach this SNR
//! allow_saturation = false              # saturated lines still allow a verdict
//! isotope_required = false              # an undeterminable isotope share makes it inconclusive
//! max_drift_nm = 0.5                    # calibrate modes: largest drift from the stored map
//! ```
use crate::excerpt::excerpt;
use crate::toml_keys::{parse, Section};
use glowcheck::judge::{profile, ExpectedSpecies, TubeProfile, BUNDLED, MAX_SPECIES};
use glowcheck::predict::Nucleus;
use std::path::Path;

/// Names of the bundled profiles, for messages.
pub fn bundled_names() -> String {
    BUNDLED
        .iter()
        .map(|(n, _)| *n)
        .collect::<Vec<_>>()
        .join(", ")
}

/// A profile by bundled name or from a file; returns it with the name to show.
pub fn resolve(arg: &str) -> Result<(String, TubeProfile), String> {
    if let Some(p) = TubeProfile::bundled(arg) {
        return Ok((arg.to_string(), p));
    }
    let path = Path::new(arg);
    if !path.exists() {
        return Err(format!(
            "--profile {}: neither a bundled profile ({}) nor an existing file",
            excerpt(arg, '"'),
            bundled_names()
        ));
    }
    let text = std::fs::read_to_string(path)
        .map_err(|e| format!("cannot read profile file {}: {e}", path.display()))?;
    let (name, p) =
        parse_profile(&text).map_err(|e| format!("profile file {}: {e}", path.display()))?;
    Ok((name.unwrap_or_else(|| path.display().to_string()), p))
}

/// Parses the text of a profile file.
pub fn parse_profile(text: &str) -> Result<(Option<String>, TubeProfile), String> {
    let table = parse(text, "profile file")?;
    let top = Section::top(&table);
    let name = top.str_opt("name")?.map(str::to_string);
    let entries = top.tables("species")?;
    if entries.is_empty() || entries.len() > MAX_SPECIES {
        return Err(format!(
            "`species`: expected 1 to {MAX_SPECIES} [[species]] tables, found {}",
            entries.len()
        ));
    }
    let mut species = [None; MAX_SPECIES];
    for (slot, e) in species.iter_mut().zip(&entries) {
        let sym = e
            .str_opt("nucleus")?
            .ok_or_else(|| format!("missing key `{}` (H, D, He4, ...)", e.name("nucleus")))?;
        let nucleus = Nucleus::from_symbol(sym)
            .map_err(|err| format!("`{}` = {}: {err}", e.name("nucleus"), excerpt(sym, '"')))?;
        let share = e.numbers_opt("share", 2, 2)?.ok_or_else(|| {
            format!(
                "missing key `{}` ([min, max] fractions of the element's light)",
                e.name("share")
            )
        })?;
        let (lo, hi) = (share[0], share[1]);
        if !(0.0..=1.0).contains(&lo) || !(0.0..=1.0).contains(&hi) || lo > hi {
            return Err(format!(
                "`{}` = [{lo}, {hi}]: expected 0 <= min <= max <= 1",
                e.name("share")
            ));
        }
        e.finish()?;
        *slot = Some(ExpectedSpecies {
            nucleus,
            min_share_permille: (lo * 1000.0).round() as u16,
            max_share_permille: (hi * 1000.0).round() as u16,
        });
    }
    let list: Vec<Nucleus> = species.iter().flatten().map(|s| s.nucleus).collect();
    if (1..list.len()).any(|i| list[..i].contains(&list[i])) {
        return Err("`species`: a nucleus is listed twice".into());
    }
    // Defaults shared by every bundled profile.
    let d = profile::HYDROGEN;
    let mut p = TubeProfile {
        species,
        isotope_required: false,
        ..d
    };
    if let Some(r) = top.table("rules")? {
        if let Some(v) = r.int_opt("min_lines", 1, 40)? {
            p.min_lines = v as u8;
        }
        if let Some(v) = r.f64_in_opt("max_line_error_nm", 0.0, 100.0)? {
            p.max_line_error_fm = (v * 1e6).round() as u32;
        }
        if let Some(v) = r.f64_in_opt("max_unexplained_fraction", 0.0, 1.0)? {
            p.max_unexplained_permille = (v * 1000.0).round() as u16;
        }
        if let Some(v) = r.f64_in_opt("min_snr", 0.0, 1.0e6)? {
            p.min_snr_q8 = (v * 256.0).round() as u32;
        }
        if let Some(v) = r.bool_opt("allow_saturation")? {
            p.allow_saturation = v;
        }
        if let Some(v) = r.bool_opt("isotope_required")? {
            p.isotope_required = v;
        }
        if let Some(v) = r.f64_in_opt("max_drift_nm", 0.0, 1000.0)? {
            p.max_drift_fm = (v * 1e6).round() as u32;
        }
        r.finish()?;
    }
    top.finish()?;
    Ok((name, p))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A file spelling out a bundled profile gives exactly that profile: the file is the same data.
    #[test]
    fn file_equals_bundled_deuterium() {
        let text = r#"
name = "deuterium, as bundled"
[[species]]
nucleus = "D"
share = [0.9, 1.0]
[[species]]
nucleus = "H"
share = [0.0, 0.1]
[rules]
min_lines = 3
max_line_error_nm = 0.05
max_unexplained_fraction = 0.05
min_snr = 20
allow_saturation = false
isotope_required = true
max_drift_nm = 0.5
"#;
        let (name, p) = parse_profile(text).unwrap();
        assert_eq!(name.as_deref(), Some("deuterium, as bundled"));
        assert_eq!(p, profile::DEUTERIUM);
    }

    #[test]
    fn bundled_names_resolve() {
        for (n, p) in BUNDLED {
            assert_eq!(resolve(n).unwrap().1, p);
        }
        let e = resolve("neon").unwrap_err();
        assert!(e.contains("hydrogen-deuterium"), "{e}");
    }

    #[test]
    fn malformed_profiles_name_the_key() {
        let base = "[[species]]\nnucleus = \"H\"\nshare = [0.9, 1.0]\n";
        let cases = [
            (base.replace("\"H\"", "\"Q\""), "species[0].nucleus"),
            (base.replace("[0.9, 1.0]", "[1.0, 0.9]"), "species[0].share"),
            (base.replace("[0.9, 1.0]", "0.9"), "species[0].share"),
            (base.replace("share", "fraction"), "species[0].share"),
            (
                format!("{base}[rules]\nmin_snr = \"high\"\n"),
                "rules.min_snr",
            ),
            (format!("{base}[rules]\nmin_lines = 0\n"), "rules.min_lines"),
            (format!("{base}[rules]\nmax_drift = 1\n"), "rules.max_drift"),
            ("name = \"x\"\n".to_string(), "species"),
        ];
        for (text, key) in cases {
            let e = parse_profile(&text).unwrap_err();
            assert!(e.contains(&format!("`{key}`")), "{key}: {e}");
        }
    }
}

//! Names of series, lines and levels in the notation of the trade (Hα, Lyβ, He II 4→3, 3d5/2).
use glowcheck::predict::Nucleus;

const GREEK: [&str; 7] = ["α", "β", "γ", "δ", "ε", "ζ", "η"];
const SERIES: [(&str, &str); 6] = [
    ("Lyman", "Ly"),
    ("Balmer", ""),
    ("Paschen", "Pa"),
    ("Brackett", "Br"),
    ("Pfund", "Pf"),
    ("Humphreys", "Hu"),
];

/// Series name by lower level: the classic names for hydrogen isotopes, "→m" otherwise.
pub fn series_name(nu: Nucleus, lower: u8) -> String {
    match SERIES.get(lower as usize - 1) {
        Some((name, _)) if nu.z() == 1 => (*name).to_string(),
        _ => format!("->{lower}"),
    }
}

/// Line label: Hα, Dβ, H10 (Balmer); Lyα, D Lyα, Paβ, Br12; "He II 4→3" beyond hydrogen.
pub fn line_label(nu: Nucleus, lower: u8, upper: u8) -> String {
    let dn = upper.saturating_sub(lower) as usize;
    if nu.z() != 1 {
        return format!("{} {}->{}", nu.spectrum(), upper, lower);
    }
    let iso = nu.symbol();
    let letter = GREEK.get(dn.wrapping_sub(1)).copied();
    match SERIES.get(lower as usize - 1) {
        Some((_, "")) => match letter {
            Some(g) => format!("{iso}{g}"),
            None => format!("{iso}{upper}"),
        },
        Some((_, abbr)) => {
            let tail = letter.map_or(format!(" {upper}"), |g| g.to_string());
            if iso == "H" {
                format!("{abbr}{tail}")
            } else {
                format!("{iso} {abbr}{tail}")
            }
        }
        None => format!("{iso} {upper}->{lower}"),
    }
}

/// Level name without n: l letter and j, e.g. "p3/2".
pub fn level_name(l: u8, j2: u8) -> String {
    const L: &[u8] = b"spdfghiklmnoqrtuvwxyz";
    let letter = L.get(l as usize).map_or('?', |&c| c as char);
    format!("{letter}{j2}/2")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels_follow_the_trade() {
        assert_eq!(line_label(Nucleus::H1, 2, 3), "Hα");
        assert_eq!(line_label(Nucleus::H2, 2, 4), "Dβ");
        assert_eq!(line_label(Nucleus::H1, 2, 10), "H10");
        assert_eq!(line_label(Nucleus::H1, 1, 2), "Lyα");
        assert_eq!(line_label(Nucleus::H2, 1, 2), "D Lyα");
        assert_eq!(line_label(Nucleus::H1, 3, 4), "Paα");
        assert_eq!(line_label(Nucleus::He4, 3, 4), "He II 4->3");
        assert_eq!(series_name(Nucleus::H1, 4), "Brackett");
        assert_eq!(series_name(Nucleus::He4, 4), "->4");
        assert_eq!(level_name(2, 5), "d5/2");
    }
}

//! The fixed inputs of the report: which nuclei, level pairs, windows and air models are printed.
//!
//! The list spans the cases later stages lean on (Balmer α–ε, Lyman α, Paschen α on every nucleus),
//! both ends of the level range (n = 1 and n = 40), every air model, and inputs that must be
//! refused, so a difference between two cores shows up somewhere in the report.

/// Level pairs `(lower, upper)` printed for every nucleus in IAU standard air.
pub const PAIRS: [(u8, u8); 17] = [
    (1, 2),   // Lyman α
    (1, 3),   // Lyman β
    (1, 40),  // near the Lyman limit
    (2, 3),   // Balmer α
    (2, 4),   // Balmer β
    (2, 5),   // Balmer γ
    (2, 6),   // Balmer δ
    (2, 7),   // Balmer ε
    (2, 40),  // near the Balmer limit
    (3, 4),   // Paschen α
    (3, 5),   // Paschen β
    (4, 5),   // Brackett α
    (5, 6),   // Pfund α
    (6, 7),   // Humphreys α
    (10, 11), // far infrared
    (20, 21), // far infrared
    (39, 40), // the longest line in range
];

/// Balmer α–ε, the pairs repeated in vacuum and under the explicit air conditions below.
pub const BALMER: [(u8, u8); 5] = [(2, 3), (2, 4), (2, 5), (2, 6), (2, 7)];

/// Explicit air: 20.000 °C (milli-°C), 95 000 Pa (a high-altitude lab), 40.0 % relative humidity (‰).
pub const AIR_CONDITIONS: (i32, u32, u16) = (20_000, 95_000, 400);

/// Femtometres per nanometre: windows below are written in nm for the reader.
pub const FM_PER_NM: u64 = 1_000_000;

/// Wavelength windows `(nucleus symbol, from_nm, to_nm)` iterated with `Lines` in standard air.
pub const WINDOWS: [(&str, u64, u64); 6] = [
    ("H", 380, 700),   // visible Balmer lines
    ("D", 650, 660),   // around D-α
    ("T", 90, 130),    // Lyman series, air "not applicable"
    ("He4", 300, 700), // He II lines from many series
    ("Li7", 10, 20),   // Li III, extreme UV
    ("O16", 1, 30),    // O VIII, many series, more lines than are printed
];

/// At most this many lines of one window are printed; the rest are counted and digested.
pub const WINDOW_PRINT_MAX: u32 = 48;

/// The whole level range, counted and digested, not printed: 1 fm to 1 m.
pub const ALL_RANGE_FM: (u64, u64) = (1, 1_000_000_000_000_000);

/// Nuclei walked over the whole range: all 780 lines each. One is enough to cover every level pair;
/// each costs about 10 s of emulated Cortex-M0 time, so the list stays short.
pub const ALL_RANGE_NUCLEI: [&str; 1] = ["H"];

/// Lines whose fine-structure components are printed one by one `(nucleus symbol, lower, upper)`.
pub const COMPONENT_LINES: [(&str, u8, u8); 4] =
    [("H", 2, 3), ("D", 2, 3), ("He4", 3, 4), ("H", 1, 2)];

/// Level pairs that must be refused: inverted, equal, zero, and above n = 40.
pub const BAD_PAIRS: [(u8, u8); 5] = [(3, 2), (2, 2), (0, 2), (40, 41), (1, 255)];

/// Air conditions that must be refused (milli-°C, Pa, ‰): boiling hot, vacuum, humidity over 100 %.
pub const BAD_AIR: [(i32, u32, u16); 3] = [
    (500_000, 101_325, 0),
    (15_000, 0, 0),
    (15_000, 101_325, 1_500),
];

/// Nucleus symbols that must be refused (lib accepts symbols case-insensitively, so none differ only in case).
pub const BAD_SYMBOLS: [&str; 3] = ["X", "", "He5"];

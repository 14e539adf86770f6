//! The serial link between a glowcheck board and the desk: sensor frames as small checked packets.
//!
//! # Wire format, version 1
//!
//! A board sends each sensor readout (or sum of readouts) as one *packet*:
//!
//! ```text
//!   COBS( version | record | crc32 ) 0x00
//! ```
//!
//! 1. **version** — one byte, [`LINK_VERSION`] (= 1). A receiver skips packets of other versions and
//!    counts them.
//! 2. **record** — the [`postcard`](https://docs.rs/postcard) serialisation (wire format 1.x) of these
//!    fields, in this order (postcard writes integers as LEB128 varints, signed ones zig-zag first, and a
//!    sequence as a varint length followed by its items):
//!
//!    | field            | type     | meaning                                                        |
//!    |------------------|----------|----------------------------------------------------------------|
//!    | `sequence`       | u32      | packet counter of the board, +1 per packet, wraps; gaps = lost |
//!    | `kind`           | u8       | 0 = signal (light), 1 = dark (shutter closed / lamp off)       |
//!    | `adc_bits`       | u8       | ADC resolution, 1 ..= 24                                       |
//!    | `integration_us` | u32      | integration time per readout, µs                               |
//!    | `sensor_temp_mc` | i32      | sensor temperature, milli-°C                                   |
//!    | `coadded`        | u16      | readouts summed into `counts` (≥ 1)                            |
//!    | `counts`         | [u32]    | one count per pixel, pixel 0 first (1 ..= 65 536 pixels)       |
//!
//! 3. **crc32** — CRC-32/ISO-HDLC (the common "CRC-32": reflected polynomial 0xEDB88320, initial value
//!    and final XOR 0xFFFFFFFF; check value of "123456789" = 0xCBF43926) of the version byte and the
//!    record bytes, appended as 4 bytes little-endian.
//! 4. **COBS** — the whole of the above is COBS-encoded (Cheshire & Baker, IEEE/ACM Trans. Networking
//!    7(2), 1999) so that it contains no zero byte, and a single `0x00` ends the packet. A board may
//!    also send a `0x00` before a packet so that a receiver that joined mid-packet resynchronises at
//!    once; empty packets are ignored.
//!
//! A receiver ([`decode::Receiver`]) splits the byte stream at zeros, COBS-decodes each piece, checks
//! its length, CRC and version, and deserialises it with no bytes left over. Anything that fails is
//! counted by cause and dropped; a piece still open when the stream ends is counted as truncated. Only
//! packets that pass every check become frames.
//!
//! # For firmware
//! [`encode`] uses `core` only (no allocation, no `std`), with `postcard`, `cobs` and `crc` built
//! without default features, so a board can include the same file: `encode::encode_packet` writes one
//! packet into caller buffers sized by [`encode::max_packet_len`].

pub mod decode;
pub mod encode;

/// Version byte of this wire format.
pub const LINK_VERSION: u8 = 1;

/// Largest pixel count of a frame on the link.
pub const MAX_LINK_PIXELS: usize = 65_536;

/// Frame kind byte of a signal frame.
pub const KIND_SIGNAL: u8 = 0;
/// Frame kind byte of a dark frame.
pub const KIND_DARK: u8 = 1;

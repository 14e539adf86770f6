//! The serial link's packet encoder for firmware, without a copy: `encode` is host-sim's
//! `host-sim/src/link/encode.rs` itself, included by path (it uses `core` only), and this crate
//! supplies the wire constants that file finds in its parent module. The format is described in
//! `host-sim/src/link/mod.rs`; `glowsim record` receives what boards send with it.
//!
//! The tests include host-sim's whole link module (receiver too) and check that the constants here are
//! the host's and that the host's receiver accepts these packets.
#![cfg_attr(not(test), no_std)]

#[path = "../../../host-sim/src/link/encode.rs"]
pub mod encode;

pub use encode::{encode_packet, max_packet_len, max_record_len, EncodeError, FrameHeader};

/// Version byte of the wire format (host-sim's `link::LINK_VERSION`).
pub const LINK_VERSION: u8 = 1;

/// Largest pixel count of a frame on the link (host-sim's `link::MAX_LINK_PIXELS`).
pub const MAX_LINK_PIXELS: usize = 65_536;

/// Frame kind byte of a signal frame (host-sim's `link::KIND_SIGNAL`).
pub const KIND_SIGNAL: u8 = 0;
/// Frame kind byte of a dark frame (host-sim's `link::KIND_DARK`).
pub const KIND_DARK: u8 = 1;

/// host-sim's link module as the desk builds it, for the tests: the receiver that `glowsim record` runs.
/// It brings its own copy of `encode.rs`, on purpose: the tests compare the two builds.
#[cfg(test)]
#[path = "../../../host-sim/src/link/mod.rs"]
#[allow(dead_code, missing_docs, clippy::duplicate_mod)]
mod host_link;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn constants_are_the_hosts() {
        assert_eq!(LINK_VERSION, host_link::LINK_VERSION);
        assert_eq!(MAX_LINK_PIXELS, host_link::MAX_LINK_PIXELS);
        assert_eq!(KIND_SIGNAL, host_link::KIND_SIGNAL);
        assert_eq!(KIND_DARK, host_link::KIND_DARK);
    }

    /// Two 2048-px frames as a board sends them (12-bit counts, back to back) come out of the host's
    /// receiver whole, with nothing dropped and no sequence gap.
    #[test]
    fn hosts_receiver_accepts_board_packets() {
        const PIXELS: usize = 2048;
        let mut scratch = [0u8; max_record_len(PIXELS)];
        let mut packet = [0u8; max_packet_len(PIXELS)];
        let mut stream = Vec::new();
        let mut sent = Vec::new();
        for sequence in 0..2u32 {
            let counts: Vec<u32> = (0..PIXELS as u32)
                .map(|p| (p * 7 + sequence * 1000) % 4096)
                .collect();
            let header = FrameHeader {
                sequence,
                kind: KIND_SIGNAL,
                adc_bits: 12,
                integration_us: 100_000,
                sensor_temp_mc: 27_500,
                coadded: 1,
            };
            let n = encode_packet(&header, &counts, &mut scratch, &mut packet).unwrap();
            stream.extend_from_slice(&packet[..n]);
            sent.push((header, counts));
        }
        let mut rx = host_link::decode::Receiver::new();
        let frames = rx.push(&stream);
        let stats = rx.finish();
        assert_eq!(stats.dropped(), 0);
        assert_eq!(stats.ok, 2);
        assert_eq!(stats.sequence_gaps, 0);
        for (got, (h, counts)) in frames.iter().zip(&sent) {
            assert_eq!(got.sequence, h.sequence);
            assert_eq!(got.kind, h.kind);
            assert_eq!(got.adc_bits, h.adc_bits);
            assert_eq!(got.integration_us, h.integration_us);
            assert_eq!(got.sensor_temp_mc, h.sensor_temp_mc);
            assert_eq!(got.coadded, h.coadded);
            assert_eq!(&got.counts, counts);
        }
    }
}

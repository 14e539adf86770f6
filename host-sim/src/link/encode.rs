//! Packet encoder of the serial link (see [`super`] for the format). `core` only: boards reuse it.
//! The host only receives; the encoder is exercised by its tests and by the record tests.
#![allow(dead_code)]
use core::fmt;
use serde::Serialize;

/// The CRC of the link: CRC-32/ISO-HDLC.
pub const CRC: crc::Crc<u32> = crc::Crc::<u32>::new(&crc::CRC_32_ISO_HDLC);

/// Bytes of the CRC at the end of a packet.
pub const CRC_LEN: usize = 4;

/// Everything of a frame record except its counts.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct FrameHeader {
    /// Packet counter of the board (+1 per packet, wraps).
    pub sequence: u32,
    /// [`super::KIND_SIGNAL`] or [`super::KIND_DARK`].
    pub kind: u8,
    /// ADC resolution, bits.
    pub adc_bits: u8,
    /// Integration time per readout, µs.
    pub integration_us: u32,
    /// Sensor temperature, milli-°C.
    pub sensor_temp_mc: i32,
    /// Readouts summed into the counts (≥ 1).
    pub coadded: u16,
}

/// The record as it is serialised: field order is the wire order.
#[derive(Serialize)]
struct WireRecord<'a> {
    sequence: u32,
    kind: u8,
    adc_bits: u8,
    integration_us: u32,
    sensor_temp_mc: i32,
    coadded: u16,
    counts: &'a [u32],
}

/// Why a packet could not be written.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum EncodeError {
    /// No counts, or more than [`super::MAX_LINK_PIXELS`].
    PixelCount,
    /// A buffer is smaller than [`max_packet_len`] / [`max_record_len`] ask for.
    BufferTooSmall,
}

impl fmt::Display for EncodeError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            EncodeError::PixelCount => f.write_str("a frame needs 1 to 65536 counts"),
            EncodeError::BufferTooSmall => f.write_str("buffer too small for the packet"),
        }
    }
}

/// Largest unencoded size (version + record + CRC) of a frame of `pixels` pixels: each varint of a u32
/// takes at most 5 bytes; the header fields at most 5 + 1 + 1 + 5 + 5 + 3 and the length 5.
pub const fn max_record_len(pixels: usize) -> usize {
    1 + 25 + 5 + 5 * pixels + CRC_LEN
}

/// Largest packet on the wire for `pixels` pixels: COBS adds one byte per 254 plus one, then the
/// closing zero.
pub const fn max_packet_len(pixels: usize) -> usize {
    cobs::max_encoding_length(max_record_len(pixels)) + 1
}

/// Writes one packet (COBS-encoded, closing zero included) into `out`, using `scratch` for the
/// unencoded bytes; returns the packet's length. `scratch` needs [`max_record_len`] bytes and `out`
/// [`max_packet_len`] bytes for the frame's pixel count.
pub fn encode_packet(
    header: &FrameHeader,
    counts: &[u32],
    scratch: &mut [u8],
    out: &mut [u8],
) -> Result<usize, EncodeError> {
    if counts.is_empty() || counts.len() > super::MAX_LINK_PIXELS {
        return Err(EncodeError::PixelCount);
    }
    let need = max_record_len(counts.len());
    if scratch.len() < need || out.len() < max_packet_len(counts.len()) {
        return Err(EncodeError::BufferTooSmall);
    }
    let (version, rest) = scratch
        .split_first_mut()
        .ok_or(EncodeError::BufferTooSmall)?;
    *version = super::LINK_VERSION;
    let record = WireRecord {
        sequence: header.sequence,
        kind: header.kind,
        adc_bits: header.adc_bits,
        integration_us: header.integration_us,
        sensor_temp_mc: header.sensor_temp_mc,
        coadded: header.coadded,
        counts,
    };
    let body_len = postcard::to_slice(&record, rest)
        .map_err(|_| EncodeError::BufferTooSmall)?
        .len();
    let crc_at = 1 + body_len;
    let crc = CRC.checksum(scratch.get(..crc_at).ok_or(EncodeError::BufferTooSmall)?);
    scratch
        .get_mut(crc_at..crc_at + CRC_LEN)
        .ok_or(EncodeError::BufferTooSmall)?
        .copy_from_slice(&crc.to_le_bytes());
    let raw = scratch
        .get(..crc_at + CRC_LEN)
        .ok_or(EncodeError::BufferTooSmall)?;
    let n = cobs::encode(raw, out);
    *out.get_mut(n).ok_or(EncodeError::BufferTooSmall)? = 0;
    Ok(n + 1)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The CRC is the common CRC-32: check value 0xCBF43926 for "123456789" (Greg Cook's CRC
    /// catalogue, "CRC-32/ISO-HDLC"; from memory).
    #[test]
    fn crc_is_the_common_crc32() {
        assert_eq!(CRC.checksum(b"123456789"), 0xCBF4_3926);
    }

    /// A hand-worked packet: 2 pixels, every field small, so the bytes can be read off the spec.
    #[test]
    fn packet_bytes_by_hand() {
        let h = FrameHeader {
            sequence: 1,
            kind: 1,
            adc_bits: 12,
            integration_us: 300,
            sensor_temp_mc: -1,
            coadded: 1,
        };
        let mut scratch = [0u8; max_record_len(2)];
        let mut out = [0u8; max_packet_len(2)];
        let n = encode_packet(&h, &[5, 200], &mut scratch, &mut out).unwrap();
        // version, seq 1, kind 1, bits 12, 300 = 0xAC 0x02, -1 zig-zag = 1, coadded 1, len 2, 5, 200 = 0xC8 0x01
        let body = [1u8, 1, 1, 12, 0xAC, 0x02, 1, 1, 2, 5, 0xC8, 0x01];
        let mut raw = body.to_vec();
        raw.extend_from_slice(&CRC.checksum(&body).to_le_bytes());
        let packet = &out[..n];
        assert_eq!(*packet.last().unwrap(), 0);
        assert!(!packet[..n - 1].contains(&0));
        let mut dec = packet[..n - 1].to_vec();
        let len = cobs::decode_in_place(&mut dec).unwrap();
        assert_eq!(&dec[..len], &raw[..]);
    }

    #[test]
    fn refuses_what_it_cannot_carry() {
        let h = FrameHeader {
            sequence: 0,
            kind: 0,
            adc_bits: 14,
            integration_us: 1,
            sensor_temp_mc: 0,
            coadded: 1,
        };
        let mut s = [0u8; 64];
        let mut o = [0u8; 64];
        assert_eq!(
            encode_packet(&h, &[], &mut s, &mut o),
            Err(EncodeError::PixelCount)
        );
        assert_eq!(
            encode_packet(&h, &[1; 40], &mut s, &mut o),
            Err(EncodeError::BufferTooSmall)
        );
    }
}

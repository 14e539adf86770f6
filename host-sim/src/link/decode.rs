//! Packet receiver of the serial link (see [`super`] for the format): bytes in, checked frames out.
use super::encode::{max_packet_len, CRC, CRC_LEN};
use super::{KIND_DARK, KIND_SIGNAL, LINK_VERSION, MAX_LINK_PIXELS};
use serde::{Deserialize, Serialize};

/// A frame record as received.
#[derive(Clone, Debug, PartialEq, Eq, Deserialize)]
pub struct FrameRecord {
    /// Packet counter of the board.
    pub sequence: u32,
    /// [`KIND_SIGNAL`] or [`KIND_DARK`].
    pub kind: u8,
    /// ADC resolution, bits.
    pub adc_bits: u8,
    /// Integration time per readout, µs.
    pub integration_us: u32,
    /// Sensor temperature, milli-°C.
    pub sensor_temp_mc: i32,
    /// Readouts summed into the counts.
    pub coadded: u16,
    /// One count per pixel.
    pub counts: Vec<u32>,
}

/// What a receiver has seen, by outcome. Every closed packet lands in exactly one field.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct LinkStats {
    /// Bytes received.
    pub bytes: u64,
    /// Packets that passed every check.
    pub ok: u64,
    /// Not valid COBS, shorter than version + CRC, or longer than the largest frame.
    pub bad_framing: u64,
    /// CRC mismatch.
    pub bad_crc: u64,
    /// Intact packets of another wire version.
    pub bad_version: u64,
    /// Intact packets whose record does not deserialise or has values out of range.
    pub bad_record: u64,
    /// A packet still open when the stream ended.
    pub truncated: u64,
    /// Packets missing according to the sequence counter (between good packets).
    pub sequence_gaps: u64,
}

impl LinkStats {
    /// Packets dropped for any reason.
    pub fn dropped(&self) -> u64 {
        self.bad_framing + self.bad_crc + self.bad_version + self.bad_record + self.truncated
    }
}

/// Splits a byte stream into packets and checks them.
pub struct Receiver {
    piece: Vec<u8>,
    overlong: bool,
    limit: usize,
    last_sequence: Option<u32>,
    /// Counts so far.
    pub stats: LinkStats,
}

impl Default for Receiver {
    fn default() -> Self {
        Self::new()
    }
}

impl Receiver {
    /// A receiver for frames up to [`MAX_LINK_PIXELS`] pixels.
    pub fn new() -> Self {
        Receiver {
            piece: Vec::new(),
            overlong: false,
            limit: max_packet_len(MAX_LINK_PIXELS),
            last_sequence: None,
            stats: LinkStats::default(),
        }
    }

    /// Takes received bytes; returns the frames they completed, in order.
    pub fn push(&mut self, bytes: &[u8]) -> Vec<FrameRecord> {
        self.stats.bytes += bytes.len() as u64;
        let mut out = Vec::new();
        for &b in bytes {
            if b != 0 {
                if self.piece.len() < self.limit {
                    self.piece.push(b);
                } else {
                    self.overlong = true;
                }
                continue;
            }
            let piece = std::mem::take(&mut self.piece);
            if std::mem::take(&mut self.overlong) {
                self.stats.bad_framing += 1;
            } else if !piece.is_empty() {
                if let Some(f) = self.check(piece) {
                    out.push(f);
                }
            }
        }
        out
    }

    /// The stream has ended: an open packet is counted as truncated. Returns the final counts.
    pub fn finish(&mut self) -> LinkStats {
        if !self.piece.is_empty() || self.overlong {
            self.stats.truncated += 1;
            self.piece.clear();
            self.overlong = false;
        }
        self.stats
    }

    fn check(&mut self, mut piece: Vec<u8>) -> Option<FrameRecord> {
        let Ok(n) = cobs::decode_in_place(&mut piece) else {
            self.stats.bad_framing += 1;
            return None;
        };
        let raw = piece.get(..n)?;
        if raw.len() < 1 + CRC_LEN {
            self.stats.bad_framing += 1;
            return None;
        }
        let (data, crc) = raw.split_at(raw.len() - CRC_LEN);
        let sent = u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]);
        if CRC.checksum(data) != sent {
            self.stats.bad_crc += 1;
            return None;
        }
        if data[0] != LINK_VERSION {
            self.stats.bad_version += 1;
            return None;
        }
        let record = match postcard::take_from_bytes::<FrameRecord>(&data[1..]) {
            Ok((r, [])) if valid(&r) => r,
            _ => {
                self.stats.bad_record += 1;
                return None;
            }
        };
        if let Some(prev) = self.last_sequence {
            let gap = record.sequence.wrapping_sub(prev).wrapping_sub(1);
            // A counter that went backwards (board restarted) is not a loss.
            if gap < u32::MAX / 2 {
                self.stats.sequence_gaps += u64::from(gap);
            }
        }
        self.last_sequence = Some(record.sequence);
        self.stats.ok += 1;
        Some(record)
    }
}

fn valid(r: &FrameRecord) -> bool {
    (r.kind == KIND_SIGNAL || r.kind == KIND_DARK)
        && (1..=24).contains(&r.adc_bits)
        && r.coadded >= 1
        && !r.counts.is_empty()
        && r.counts.len() <= MAX_LINK_PIXELS
}

#[cfg(test)]
mod tests {
    use super::super::encode::{encode_packet, max_record_len, FrameHeader};
    use super::*;

    fn packet(seq: u32, counts: &[u32]) -> Vec<u8> {
        let h = FrameHeader {
            sequence: seq,
            kind: KIND_SIGNAL,
            adc_bits: 14,
            integration_us: 100_000,
            sensor_temp_mc: 24_500,
            coadded: 1,
        };
        let mut s = vec![0; max_record_len(counts.len())];
        let mut o = vec![0; max_packet_len(counts.len())];
        let n = encode_packet(&h, counts, &mut s, &mut o).unwrap();
        o.truncate(n);
        o
    }

    #[test]
    fn round_trip_in_any_chunking() {
        let counts: Vec<u32> = (0..300).map(|i| (i * 37 % 16_000) as u32).collect();
        let mut stream = vec![0u8];
        for s in 0..5 {
            stream.extend(packet(s, &counts));
        }
        for chunk in [1, 7, 4096] {
            let mut r = Receiver::new();
            let frames: Vec<FrameRecord> = stream.chunks(chunk).flat_map(|c| r.push(c)).collect();
            assert_eq!(frames.len(), 5);
            assert!(frames.iter().all(|f| f.counts == counts));
            assert_eq!(r.finish().dropped(), 0);
        }
    }

    /// Each kind of damage lands in its own counter; the neighbours survive.
    #[test]
    fn damage_is_counted_by_cause() {
        let c = [10u32, 20, 30, 0, 70_000];
        let good = packet(0, &c);
        let mut flipped = packet(1, &c);
        flipped[5] ^= 0x10; // not a zero afterwards: the CRC catches it
        assert_ne!(flipped[5], 0);
        let cut = packet(2, &c)[..6].to_vec(); // lost tail, then the next packet's bytes
        let mut stream = good.clone();
        stream.extend(&flipped);
        stream.extend(&cut);
        stream.extend(packet(3, &c));
        stream.extend(&good[..good.len() - 1]); // open at the end
        let mut r = Receiver::new();
        let frames = r.push(&stream);
        let st = r.finish();
        assert_eq!(frames.iter().map(|f| f.sequence).collect::<Vec<_>>(), [0]);
        assert_eq!(st.ok, 1);
        assert_eq!(st.bad_crc + st.bad_framing, 2, "{st:?}");
        assert_eq!(st.truncated, 1);
        // Version 2 with a correct CRC is an intact packet of another format.
        let mut raw = vec![2u8, 9, 9];
        raw.extend_from_slice(&CRC.checksum(&raw).to_le_bytes());
        let mut enc = vec![0; cobs::max_encoding_length(raw.len())];
        let n = cobs::encode(&raw, &mut enc);
        enc.truncate(n);
        enc.push(0);
        let mut r = Receiver::new();
        assert!(r.push(&enc).is_empty());
        assert_eq!(r.finish().bad_version, 1);
    }

    #[test]
    fn sequence_gaps_are_counted() {
        let mut r = Receiver::new();
        for s in [5u32, 6, 9, 10] {
            r.push(&packet(s, &[1, 2]));
        }
        assert_eq!(r.finish().sequence_gaps, 2);
    }
}

//! `glowsim record` end to end over a pseudo-terminal: a stream with injected damage yields exactly
//! the undamaged frames, in order, and every dropped packet is counted under its cause.
//!
//! The packets are made by the encoder boards use (`src/link/encode.rs`, included as is).
use nix::pty::openpty;
use nix::sys::termios::{cfmakeraw, tcgetattr, tcsetattr, SetArg};
use std::io::Write as _;
use std::process::{Command, Stdio};

/// The wire version the format documents (host-sim/src/link/mod.rs).
const LINK_VERSION: u8 = 1;
/// Largest frame of the format.
const MAX_LINK_PIXELS: usize = 65_536;

#[path = "../src/link/encode.rs"]
mod encode;
use encode::{encode_packet, max_packet_len, max_record_len, FrameHeader, CRC, CRC_LEN};

const PIXELS: usize = 2048;

fn counts(seq: u32, pixels: usize) -> Vec<u32> {
    (0..pixels as u32)
        .map(|p| (seq * 7919 + p * 31 + (p * p) % 97) % 16_000)
        .collect()
}

fn header(seq: u32) -> FrameHeader {
    FrameHeader {
        sequence: seq,
        kind: u8::from(seq % 5 == 4),
        adc_bits: 14,
        integration_us: 50_000,
        sensor_temp_mc: 23_250,
        coadded: 1,
    }
}

fn packet(h: &FrameHeader, c: &[u32]) -> Vec<u8> {
    let mut s = vec![0; max_record_len(c.len())];
    let mut o = vec![0; max_packet_len(c.len())];
    let n = encode_packet(h, c, &mut s, &mut o).unwrap();
    o.truncate(n);
    o
}

/// An intact packet of another wire version: same record, version byte 2, CRC recomputed.
fn other_version(p: &[u8]) -> Vec<u8> {
    let mut raw = p[..p.len() - 1].to_vec();
    let n = cobs::decode_in_place(&mut raw).unwrap();
    raw.truncate(n - CRC_LEN);
    raw[0] = 2;
    let crc = CRC.checksum(&raw);
    raw.extend_from_slice(&crc.to_le_bytes());
    let mut enc = vec![0; cobs::max_encoding_length(raw.len())];
    let m = cobs::encode(&raw, &mut enc);
    enc.truncate(m);
    enc.push(0);
    enc
}

/// Glowtrace frames of a file: (kind, counts).
fn read_frames(text: &str) -> Vec<(String, Vec<u32>)> {
    let mut frames: Vec<(String, Vec<u32>)> = Vec::new();
    for line in text.lines() {
        if let Some(k) = line.strip_prefix("frame ") {
            frames.push((k.to_string(), Vec::new()));
        } else if line == "end" {
            break;
        } else if let Some(f) = frames.last_mut() {
            f.1.extend(line.split_whitespace().map(|w| w.parse::<u32>().unwrap()));
        }
    }
    frames
}

#[test]
fn damaged_packets_are_counted_and_never_written() {
    let pty = openpty(None, None).unwrap();
    // Raw mode before any byte moves: no echo, no line editing, no special characters.
    let mut t = tcgetattr(&pty.slave).unwrap();
    cfmakeraw(&mut t);
    tcsetattr(&pty.slave, SetArg::TCSANOW, &t).unwrap();
    let slave = nix::unistd::ttyname(&pty.slave).unwrap();
    let out = std::env::temp_dir().join(format!("glowsim-record-{}.trace", std::process::id()));
    let _ = std::fs::remove_file(&out);

    let mut stream = Vec::new();
    let mut expected = Vec::new();
    let damaged = [3u32, 7, 11, 15, 19];
    for seq in 0..30u32 {
        let h = header(seq);
        let c = counts(seq, PIXELS);
        let mut p = packet(&h, &c);
        match seq {
            3 => {
                let i = p.len() / 2;
                p[i] = if p[i] == 0x55 { 0xAA } else { p[i] ^ 0x55 }.max(1); // a flipped byte, never zero
            }
            7 => {
                p.truncate(p.len() - 11); // the tail is lost...
                p.push(0); // ...and the next packet's leading zero closes it
            }
            11 => p = other_version(&p),
            15 => {
                let i = p.len() - 3; // inside the CRC
                p[i] = if p[i] == 1 { 2 } else { 1 };
            }
            19 => {
                p.remove(100); // a dropped byte
            }
            _ => expected.push((if h.kind == 1 { "dark" } else { "signal" }, c)),
        }
        stream.push(0); // resynchronising zero, as the format recommends
        stream.extend(p);
    }
    // An intact packet that does not fit the recording (another pixel count), and a cut-off end.
    stream.extend(packet(&header(30), &counts(30, 1024)));
    let last = packet(&header(31), &counts(31, PIXELS));
    stream.extend(&last[..last.len() / 2]);
    assert!(damaged
        .iter()
        .all(|d| !expected.iter().any(|e| e.1 == counts(*d, PIXELS))));

    let child = Command::new(env!("CARGO_BIN_EXE_glowsim"))
        .args(["record", "--idle-timeout-s", "1.5", "--json", "--port"])
        .arg(&slave)
        .arg("--out")
        .arg(&out)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut master = std::fs::File::from(pty.master);
    for chunk in stream.chunks(777) {
        master.write_all(chunk).unwrap();
    }
    master.flush().unwrap();
    let o = child.wait_with_output().unwrap();
    drop(master);
    let stderr = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{stderr}");
    let j: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let link = &j["link"];
    assert_eq!(j["stopped_by"], "idle timeout");
    assert_eq!(link["bytes"].as_u64().unwrap() as usize, stream.len());
    assert_eq!(
        j["frames_written"].as_u64().unwrap() as usize,
        expected.len()
    );
    assert_eq!(j["dark_frames"], 5); // sequences 4, 9, 14, 24, 29 (19 was damaged)
    assert_eq!(link["ok"].as_u64().unwrap() as usize, expected.len() + 1);
    assert_eq!(j["inconsistent"], 1);
    assert_eq!(link["bad_version"], 1);
    assert_eq!(
        link["bad_crc"].as_u64().unwrap() + link["bad_framing"].as_u64().unwrap(),
        4,
        "{link}"
    );
    assert_eq!(link["bad_record"], 0);
    assert_eq!(link["truncated"], 1);
    assert_eq!(link["sequence_gaps"], 5);

    let text = std::fs::read_to_string(&out).unwrap();
    assert!(text.starts_with(
        "glowtrace 1\npixels: 2048\nadc_bits: 14\nintegration_us: 50000\nsensor_temp_mc: 23250\n"
    ));
    let frames = read_frames(&text);
    assert_eq!(frames.len(), expected.len());
    for (i, ((k, c), (ek, ec))) in frames.iter().zip(&expected).enumerate() {
        assert_eq!(k, ek, "frame {i}");
        assert!(c == ec, "frame {i}: counts differ");
    }
    std::fs::remove_file(&out).unwrap();
}

/// A captured byte stream in a file replays the same way; nothing usable means nothing written.
#[test]
fn capture_file_and_empty_stream() {
    let dir = std::env::temp_dir().join(format!("glowsim-record-file-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let cap = dir.join("capture.bin");
    let mut bytes = Vec::new();
    for s in 0..3 {
        bytes.extend(packet(&header(s), &counts(s, 64)));
    }
    std::fs::write(&cap, &bytes).unwrap();
    let out = dir.join("r.trace");
    let o = Command::new(env!("CARGO_BIN_EXE_glowsim"))
        .args(["record", "--port"])
        .arg(&cap)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    assert_eq!(
        read_frames(&std::fs::read_to_string(&out).unwrap()).len(),
        3
    );
    let junk = dir.join("junk.bin");
    std::fs::write(&junk, [1u8, 2, 3, 0, 9, 9]).unwrap();
    let out2 = dir.join("none.trace");
    let o = Command::new(env!("CARGO_BIN_EXE_glowsim"))
        .args(["record", "--port"])
        .arg(&junk)
        .arg("--out")
        .arg(&out2)
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
    assert!(!out2.exists());
    std::fs::remove_dir_all(&dir).unwrap();
}

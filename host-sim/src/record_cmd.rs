//! `glowsim record`: frames streamed by a board over a serial line (see [`crate::link`] for the wire
//! format) into one trace file. Damaged packets are counted and skipped, never written.
use crate::defaults::{write_atomic, Defaults};
use crate::link::decode::{FrameRecord, LinkStats, Receiver};
use crate::link::KIND_DARK;
use crate::trace::{Frame, FrameKind, Trace};
use serde::Serialize;
use std::io::Read as _;
use std::os::fd::AsFd as _;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};

const EXAMPLES: &str = "\
Examples:
  # record until Ctrl-C (or the board closes the line), then write the trace
  glowsim record --port /dev/ttyACM0 --out lamp7.trace
  # 10 frames, or stop after 5 s without data; counts as JSON
  glowsim record --port /dev/ttyUSB0 --baud 921600 --max-frames 10 --idle-timeout-s 5 --out d2.trace --json
  # replay a captured byte stream
  glowsim record --port capture.bin --out replay.trace

The port may be a serial device (set to raw mode at --baud), a pseudo-terminal, a FIFO or a file of
captured bytes. Packets with a bad CRC, broken framing, another format version or a cut-off end are
counted and dropped; frames whose pixel count or settings differ from the first good frame are counted
as inconsistent and dropped. The trace is written once, at the end, through a temporary file.

Safety: the board's lamp runs at kilovolts and may emit UV; hydrogen and deuterium burn in air from
about 4 % to 75 %.";

/// Command-line options.
#[derive(clap::Args)]
#[command(after_help = EXAMPLES)]
pub struct Args {
    /// Serial port (or pty, FIFO, capture file); default from the config file's `record.port`.
    #[arg(long)]
    port: Option<PathBuf>,
    /// Output trace file; default from `record.out`.
    #[arg(long)]
    out: Option<PathBuf>,
    /// Line speed for serial devices (default 115200 or `record.baud`).
    #[arg(long)]
    baud: Option<u32>,
    /// Stop after this many good frames.
    #[arg(long)]
    max_frames: Option<u64>,
    /// Stop after this many seconds without a byte.
    #[arg(long)]
    idle_timeout_s: Option<f64>,
    /// Print the counts as JSON.
    #[arg(long)]
    json: bool,
}

/// What a recording did, as `--json` prints it.
#[derive(Serialize, Debug)]
pub struct RecordJson {
    /// The output file (null when nothing was written).
    pub out: Option<String>,
    /// Frames written.
    pub frames_written: u64,
    /// Signal frames among them.
    pub signal_frames: u64,
    /// Dark frames among them.
    pub dark_frames: u64,
    /// Good packets whose pixel count or settings differ from the first one.
    pub inconsistent: u64,
    /// Link counts.
    pub link: LinkStats,
    /// Why recording stopped.
    pub stopped_by: &'static str,
}

/// Collects frames into one trace; the first good frame fixes the header.
struct Collector {
    trace: Option<Trace>,
    inconsistent: u64,
}

impl Collector {
    fn take(&mut self, r: FrameRecord) {
        let kind = if r.kind == KIND_DARK {
            FrameKind::Dark
        } else {
            FrameKind::Signal
        };
        let t = self.trace.get_or_insert_with(|| {
            let mut t = Trace::new(r.counts.len());
            t.adc_bits = Some(r.adc_bits);
            t.integration_us = Some(u64::from(r.integration_us));
            t.sensor_temp_mc = Some(i64::from(r.sensor_temp_mc));
            t.coadded = u32::from(r.coadded);
            t
        });
        let same = t.pixels == r.counts.len()
            && t.adc_bits == Some(r.adc_bits)
            && t.integration_us == Some(u64::from(r.integration_us))
            && t.coadded == u32::from(r.coadded)
            && r.counts.iter().all(|&c| u64::from(c) <= t.max_count());
        if !same {
            self.inconsistent += 1;
            return;
        }
        t.frames.push(Frame {
            kind,
            counts: r.counts,
        });
    }
}

fn open_port(path: &Path, baud: u32) -> Result<std::fs::File, String> {
    use std::os::unix::fs::OpenOptionsExt as _;
    let file = std::fs::OpenOptions::new()
        .read(true)
        .custom_flags(nix::fcntl::OFlag::O_NOCTTY.bits())
        .open(path)
        .map_err(|e| format!("cannot open port {}: {e}", path.display()))?;
    if nix::unistd::isatty(file.as_fd()).unwrap_or(false) {
        use nix::sys::termios::{self, SetArg};
        let mut t = termios::tcgetattr(file.as_fd())
            .map_err(|e| format!("{}: cannot read line settings: {e}", path.display()))?;
        termios::cfmakeraw(&mut t);
        let speed = baud_rate(baud)?;
        termios::cfsetspeed(&mut t, speed)
            .map_err(|e| format!("{}: cannot set {baud} baud: {e}", path.display()))?;
        termios::tcsetattr(file.as_fd(), SetArg::TCSANOW, &t)
            .map_err(|e| format!("{}: cannot set raw mode: {e}", path.display()))?;
    }
    Ok(file)
}

fn baud_rate(b: u32) -> Result<nix::sys::termios::BaudRate, String> {
    use nix::sys::termios::BaudRate as B;
    Ok(match b {
        9600 => B::B9600,
        19_200 => B::B19200,
        38_400 => B::B38400,
        57_600 => B::B57600,
        115_200 => B::B115200,
        230_400 => B::B230400,
        460_800 => B::B460800,
        921_600 => B::B921600,
        1_000_000 => B::B1000000,
        2_000_000 => B::B2000000,
        _ => return Err(format!("--baud {b}: use one of 9600, 19200, 38400, 57600, 115200, 230400, 460800, 921600, 1000000, 2000000")),
    })
}

/// Reads until the stream ends, an interrupt, `max_frames` or the idle timeout.
fn receive(
    file: &mut std::fs::File,
    rx: &mut Receiver,
    col: &mut Collector,
    args: &Args,
    stop: &AtomicBool,
) -> Result<&'static str, String> {
    use nix::poll::{poll, PollFd, PollFlags, PollTimeout};
    let idle = args.idle_timeout_s.map(Duration::from_secs_f64);
    let mut last_byte = Instant::now();
    let mut buf = vec![0u8; 1 << 14];
    loop {
        if stop.load(Ordering::SeqCst) {
            return Ok("interrupt");
        }
        if idle.is_some_and(|d| last_byte.elapsed() >= d) {
            return Ok("idle timeout");
        }
        let ready = {
            let mut fds = [PollFd::new(file.as_fd(), PollFlags::POLLIN)];
            match poll(&mut fds, PollTimeout::from(100u16)) {
                Ok(n) => n > 0,
                Err(nix::errno::Errno::EINTR) => false,
                Err(e) => return Err(format!("waiting for data: {e}")),
            }
        };
        if !ready {
            continue;
        }
        let n = match file.read(&mut buf) {
            Ok(0) => return Ok("end of stream"),
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            // A pseudo-terminal whose other side closed, or a device that went away.
            Err(e) if e.raw_os_error() == Some(nix::libc::EIO) => return Ok("line closed"),
            Err(e) => return Err(format!("reading the port: {e}")),
        };
        last_byte = Instant::now();
        for f in rx.push(&buf[..n]) {
            col.take(f);
            let written = col.trace.as_ref().map_or(0, |t| t.frames.len() as u64);
            if args.max_frames.is_some_and(|m| written >= m) {
                return Ok("max frames");
            }
        }
    }
}

/// Runs the command.
pub fn run(args: &Args, defaults: &Defaults) -> Result<(), String> {
    let port = Defaults::pick(&args.port, &defaults.record_port, "--port", "record.port")?;
    let out = Defaults::pick(&args.out, &defaults.record_out, "--out", "record.out")?;
    let baud = args.baud.or(defaults.record_baud).unwrap_or(115_200);
    if let Some(s) = args.idle_timeout_s {
        if !(s.is_finite() && s > 0.0) {
            return Err(format!("--idle-timeout-s must be > 0, got {s}"));
        }
    }
    let stop = Arc::new(AtomicBool::new(false));
    {
        let stop = stop.clone();
        // A second handler (batch in the same process) is not possible here: one command per run.
        let _ = ctrlc::set_handler(move || stop.store(true, Ordering::SeqCst));
    }
    let mut file = open_port(&port, baud)?;
    let mut rx = Receiver::new();
    let mut col = Collector {
        trace: None,
        inconsistent: 0,
    };
    let stopped_by = receive(&mut file, &mut rx, &mut col, args, &stop)?;
    let stats = rx.finish();
    let mut report = RecordJson {
        out: None,
        frames_written: 0,
        signal_frames: 0,
        dark_frames: 0,
        inconsistent: col.inconsistent,
        link: stats,
        stopped_by,
    };
    if let Some(mut t) = col.trace.take().filter(|t| !t.frames.is_empty()) {
        report.frames_written = t.frames.len() as u64;
        report.dark_frames = t.frames_of(FrameKind::Dark).count() as u64;
        report.signal_frames = report.frames_written - report.dark_frames;
        t.notes.push(format!(
            "recorded by glowsim record from {}",
            port.display()
        ));
        let mut extra = |k: &str, v: u64| t.extras.push((format!("record.{k}"), v.to_string()));
        extra("packets_ok", stats.ok);
        extra("dropped", stats.dropped());
        extra("inconsistent", col.inconsistent);
        extra("sequence_gaps", stats.sequence_gaps);
        let text = crate::trace::native::to_text(&t).map_err(|e| e.to_string())?;
        write_atomic(&out, text.as_bytes())?;
        report.out = Some(out.display().to_string());
    }
    let text = if args.json {
        serde_json::to_string(&report).map_err(|e| e.to_string())? + "\n"
    } else {
        let s = &report.link;
        format!(
            "{}: {} frame(s) ({} signal, {} dark) from {} bytes; dropped {} (bad CRC {}, framing {}, other version {}, bad record {}, cut off {}), inconsistent {}, sequence gaps {}; stopped by {}\n",
            report.out.as_deref().unwrap_or("nothing written"),
            report.frames_written,
            report.signal_frames,
            report.dark_frames,
            s.bytes,
            s.dropped(),
            s.bad_crc,
            s.bad_framing,
            s.bad_version,
            s.bad_record,
            s.truncated,
            report.inconsistent,
            s.sequence_gaps,
            report.stopped_by
        )
    };
    crate::trace::write_stdout(&text)?;
    if report.frames_written == 0 {
        return Err(format!(
            "no good frame received from {}; nothing written",
            port.display()
        ));
    }
    Ok(())
}

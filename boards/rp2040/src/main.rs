//! glowcheck on an RP2040 (Raspberry Pi Pico): reads a clocked linear photodiode array (start pulse +
//! pixel clock + analog video out) through lib's [`LinearArray`] driver, checks every frame with
//! [`Checker`], shows the verdict on the LED and as a text line on UART0, and streams each frame on
//! UART1 as link packets for `glowsim record`.
//!
//! Pin map (Pico numbering):
//!
//! | GPIO        | role                                                        |
//! |-------------|-------------------------------------------------------------|
//! | GP2         | start pulse to the array (output)                           |
//! | GP3         | pixel clock to the array (output)                           |
//! | GP26 / ADC0 | the array's video output, scaled into 0–3.3 V (input)       |
//! | GP25        | on-board LED: verdict                                       |
//! | GP0 / GP1   | UART0 TX / RX: verdict lines, 115 200 baud 8N1              |
//! | GP4 / GP5   | UART1 TX / RX: frame packets, 921 600 baud 8N1              |
//!
//! The check configuration is the demo bench's (`glowcheck_pipeline_report::config_for`: 2048 px, its
//! stored wavelength map as the prior, calibrate mode, hydrogen profile) with this board's 12-bit ADC
//! and exposure; a real instrument swaps in its own map and profile (see boards/README.md).
//!
//! Safety: the tube this looks at runs at kilovolts and emits UV, and hydrogen burns; the firmware
//! never switches it.
#![no_std]
#![no_main]

mod show;
mod video;

use core::fmt::Write;
use core::ptr::addr_of_mut;

use embedded_hal::digital::OutputPin;
use glowcheck::acquire::{ArrayConfig, ArrayTiming, LinearArray};
use glowcheck::check::{Buffers, Checker, Config};
use glowcheck::condition::{ConditionConfig, FrameSum};
use glowcheck::judge::profile::HYDROGEN;
use glowcheck::judge::{Mode, Report};
use glowcheck_link::{encode_packet, max_packet_len, max_record_len, FrameHeader, KIND_SIGNAL};
use rp2040_hal::{self as hal, fugit::RateExtU32, pac, uart, Clock};

use show::{show, Shown};
use video::VideoAdc;

/// The second-stage bootloader for the Pico's W25Q080-family flash, placed by `memory.x`.
#[link_section = ".boot2"]
#[used]
pub static BOOT2_FIRMWARE: [u8; 256] = rp2040_boot2::BOOT_LOADER_W25Q080;

/// The Pico's crystal (Hz).
const XTAL_HZ: u32 = 12_000_000;
/// Pixels of the array (the demo bench's sensor, which the bundled configuration describes).
const PIXELS: usize = 2048;
/// Exposure of every pixel (µs): the bench's 100 ms.
const INTEGRATION_US: u32 = 100_000;
/// Half a pixel clock (ns): a 500 kHz clock. A whole microsecond, since the RP2040 timer's delay
/// rounds up to microseconds.
const CLOCK_HALF_PERIOD_NS: u32 = 1_000;
/// Clocks after the last pixel that end the array's scan.
const TRAILING_CLOCKS: u16 = 1;
/// Line speed of the verdict lines (UART0) and of the frame packets (UART1), baud.
const TEXT_BAUD: u32 = 115_200;
const LINK_BAUD: u32 = 921_600;

/// Everything big, in `.bss` rather than on the stack: the frame as read, the same widened for the
/// link, the link's buffers, and the check's buffers.
struct Storage {
    frame: [u16; PIXELS],
    wide: [u32; PIXELS],
    scratch: [u8; max_record_len(PIXELS)],
    packet: [u8; max_packet_len(PIXELS)],
    buffers: Buffers<PIXELS>,
}

static mut STORAGE: Storage = Storage {
    frame: [0; PIXELS],
    wide: [0; PIXELS],
    scratch: [0; max_record_len(PIXELS)],
    packet: [0; max_packet_len(PIXELS)],
    buffers: Buffers::new(),
};

/// The check's report (≈ 3 KiB; its empty value is all zeros, so it is in `.bss` too).
static mut REPORT: Report = Report::new();

/// The bundled check configuration: the demo bench's, with this board's ADC and exposure.
fn config() -> Option<Config> {
    let mut cfg =
        glowcheck_pipeline_report::config_for(PIXELS as u16, HYDROGEN, Mode::Calibrate).ok()?;
    // Conversion gain unknown on this board (0): the check estimates the noise from the frame.
    cfg.condition = ConditionConfig::new(video::ADC_FULL_SCALE, INTEGRATION_US);
    Some(cfg)
}

#[hal::entry]
fn main() -> ! {
    // SAFETY: `main` runs once and never returns, no interrupt touches these statics, and these are
    // the only references ever taken to them, so they are unique.
    let (storage, report) = unsafe { (&mut *addr_of_mut!(STORAGE), &mut *addr_of_mut!(REPORT)) };
    let Some(mut pac) = pac::Peripherals::take() else {
        halt()
    };
    let mut watchdog = hal::Watchdog::new(pac.WATCHDOG);
    let Ok(clocks) = hal::clocks::init_clocks_and_plls(
        XTAL_HZ,
        pac.XOSC,
        pac.CLOCKS,
        pac.PLL_SYS,
        pac.PLL_USB,
        &mut pac.RESETS,
        &mut watchdog,
    ) else {
        halt()
    };
    let sio = hal::Sio::new(pac.SIO);
    let pins = hal::gpio::Pins::new(
        pac.IO_BANK0,
        pac.PADS_BANK0,
        sio.gpio_bank0,
        &mut pac.RESETS,
    );
    let mut timer = hal::Timer::new(pac.TIMER, &mut pac.RESETS, &clocks);
    let mut led = pins.gpio25.into_push_pull_output();
    let _ = led.set_low();

    let text_pins = (
        pins.gpio0.into_function::<hal::gpio::FunctionUart>(),
        pins.gpio1.into_function::<hal::gpio::FunctionUart>(),
    );
    let link_pins = (
        pins.gpio4.into_function::<hal::gpio::FunctionUart>(),
        pins.gpio5.into_function::<hal::gpio::FunctionUart>(),
    );
    let line = |baud: u32| {
        uart::UartConfig::new(baud.Hz(), uart::DataBits::Eight, None, uart::StopBits::One)
    };
    let Ok(mut text) = uart::UartPeripheral::new(pac.UART0, text_pins, &mut pac.RESETS)
        .enable(line(TEXT_BAUD), clocks.peripheral_clock.freq())
    else {
        fault_forever(&mut led, &mut timer)
    };
    let _ = writeln!(
        text,
        "glowcheck rp2040 {}: caution: discharge tubes run at kilovolts and emit UV; hydrogen burns",
        env!("CARGO_PKG_VERSION")
    );
    let Ok(link) = uart::UartPeripheral::new(pac.UART1, link_pins, &mut pac.RESETS)
        .enable(line(LINK_BAUD), clocks.peripheral_clock.freq())
    else {
        let _ = writeln!(text, "error: UART1 (frame link) did not start");
        fault_forever(&mut led, &mut timer)
    };

    let adc = hal::Adc::new(pac.ADC, &mut pac.RESETS);
    let Ok(video_pin) = hal::adc::AdcPin::new(pins.gpio26.into_floating_input()) else {
        let _ = writeln!(text, "error: GP26 is not an ADC input");
        fault_forever(&mut led, &mut timer)
    };
    let mut timing = ArrayConfig::new(PIXELS as u16, INTEGRATION_US, CLOCK_HALF_PERIOD_NS);
    timing.trailing_clocks = TRAILING_CLOCKS;
    timing.sample_time_ns = video::CONVERSION_NS;
    let timing = match ArrayTiming::new(timing) {
        Ok(t) => t,
        Err(e) => {
            let _ = writeln!(text, "error: sensor timing: {e}");
            fault_forever(&mut led, &mut timer)
        }
    };
    let mut array = LinearArray::new(
        pins.gpio2.into_push_pull_output(),
        pins.gpio3.into_push_pull_output(),
        timer,
        VideoAdc::new(adc, video_pin),
        timing,
    );

    let checker = match config().map(Checker::new) {
        Some(Ok(c)) => c,
        Some(Err(e)) => {
            let _ = writeln!(text, "error: check configuration: {e}");
            fault_forever(&mut led, &mut timer)
        }
        None => {
            let _ = writeln!(text, "error: the bundled wavelength map was refused");
            fault_forever(&mut led, &mut timer)
        }
    };

    let mut sequence: u32 = 0;
    loop {
        let shown = match array.read_frame(&mut storage.frame) {
            Err(e) => {
                let _ = writeln!(text, "frame {sequence} error: read: {e}");
                Shown::Fault
            }
            Ok(()) => {
                let temp_mc = array.source_mut().die_temperature_mc();
                stream(&link, storage, sequence, temp_mc.unwrap_or(0));
                let checked = FrameSum::single(&storage.frame)
                    .map_err(Into::into)
                    .and_then(|signal| {
                        checker.check(
                            signal,
                            None,
                            None,
                            storage.buffers.workspace(PIXELS),
                            report,
                        )
                    });
                match checked {
                    Ok(()) => {
                        verdict_line(&mut text, sequence, temp_mc, report);
                        Shown::Verdict(report.verdict)
                    }
                    Err(e) => {
                        let _ = writeln!(text, "frame {sequence} error: check: {e}");
                        Shown::Fault
                    }
                }
            }
        };
        show(&mut led, &mut timer, shown);
        sequence = sequence.wrapping_add(1);
    }
}

/// Sends the frame just read as one link packet on UART1 (the packet ends with its zero byte).
fn stream<D: uart::UartDevice, P: uart::ValidUartPinout<D>>(
    link: &uart::UartPeripheral<uart::Enabled, D, P>,
    storage: &mut Storage,
    sequence: u32,
    temp_mc: i32,
) {
    for (w, &c) in storage.wide.iter_mut().zip(storage.frame.iter()) {
        *w = u32::from(c);
    }
    let header = FrameHeader {
        sequence,
        kind: KIND_SIGNAL,
        adc_bits: video::ADC_BITS,
        integration_us: INTEGRATION_US,
        sensor_temp_mc: temp_mc,
        coadded: 1,
    };
    if let Ok(n) = encode_packet(
        &header,
        &storage.wide,
        &mut storage.scratch,
        &mut storage.packet,
    ) {
        if let Some(bytes) = storage.packet.get(..n) {
            link.write_full_blocking(bytes);
        }
    }
}

/// `frame <n> verdict <pass|fail|inconclusive> reasons <code,code|-> lines <matched> temp_mc <t|->`.
fn verdict_line<W: Write>(out: &mut W, sequence: u32, temp_mc: Option<i32>, report: &Report) {
    let _ = write!(
        out,
        "frame {sequence} verdict {} reasons",
        report.verdict.as_str()
    );
    if report.reasons.is_empty() {
        let _ = write!(out, " -");
    }
    for (i, reason) in report.reasons.iter().enumerate() {
        let _ = write!(out, "{}{}", if i == 0 { " " } else { "," }, reason.code());
    }
    let _ = write!(out, " lines {}", report.lines.len());
    let _ = match temp_mc {
        Some(t) => writeln!(out, " temp_mc {t}"),
        None => writeln!(out, " temp_mc -"),
    };
}

/// Nothing can be checked: flash the fault pattern until reset.
fn fault_forever<L: OutputPin>(led: &mut L, timer: &mut hal::Timer) -> ! {
    loop {
        show(led, timer, Shown::Fault);
    }
}

/// Stops before the clocks run (nothing to show anything with).
fn halt() -> ! {
    loop {
        cortex_m::asm::wfe();
    }
}

/// A panic stops the core on a permanently undefined instruction (HardFault, which loops): the LED
/// stays dark and no more verdict lines come. rp2040-hal 0.12 keeps a few panic paths of its own (clock
/// and baud-rate divider arithmetic, the SIO core number, the UART writer's slicing) and postcard one
/// in the link encoder, so the link-time proof of `boards/nopanic` cannot hold for this image;
/// `boards/check.sh` instead lists the image's panic call sites and fails if one is in lib or in
/// this crate.
#[panic_handler]
fn panic(_info: &core::panic::PanicInfo) -> ! {
    cortex_m::asm::udf()
}

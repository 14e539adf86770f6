//! The RP2040's ADC as the sensor's sample source, and its on-chip temperature sensor.

use glowcheck::acquire::{SampleError, SampleErrorKind, SampleSource};
use rp2040_hal::adc::{Adc, AdcChannel, TempSense};

/// Full scale of the RP2040's 12-bit ADC (counts).
pub const ADC_FULL_SCALE: u16 = 4095;
/// Resolution sent with each frame on the link (bits).
pub const ADC_BITS: u8 = 12;
/// One conversion: 96 cycles of the 48 MHz ADC clock (RP2040 datasheet, section 4.9; from memory).
/// The driver waits this long in the emptying scan so both scans run at the same pace.
pub const CONVERSION_NS: u32 = 2_000;

/// The ADC with the video input's channel, and the temperature channel when it could be had.
pub struct VideoAdc<P> {
    adc: Adc,
    video: P,
    temperature: Option<TempSense>,
}

/// The ADC flagged a conversion as failed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ConversionFailed;

impl SampleError for ConversionFailed {
    fn kind(&self) -> SampleErrorKind {
        SampleErrorKind::Conversion
    }
}

impl<P: AdcChannel> VideoAdc<P> {
    /// Takes the ADC and the video input's pin (already in ADC mode) and switches the temperature
    /// sensor on.
    pub fn new(mut adc: Adc, video: P) -> Self {
        let temperature = adc.take_temp_sensor();
        Self {
            adc,
            video,
            temperature,
        }
    }

    /// The chip's temperature (milli-°C), the nearest the board has to the sensor's; `None` if the
    /// channel is missing or the conversion failed.
    ///
    /// RP2040 datasheet, section 4.9.5 (from memory): T = 27 °C − (V − 0.706 V) / 1.721 mV/°C, with V
    /// the channel's voltage on the 3.3 V reference. In integers: V = raw · 3 300 000 / 4096 µV, then
    /// T = 27 000 − (V − 706 000) · 1000 / 1721 m°C. Accurate to a few °C only.
    pub fn die_temperature_mc(&mut self) -> Option<i32> {
        let channel = self.temperature.as_mut()?;
        let raw = self.adc.read(channel).ok()?;
        Some(die_temperature_mc(raw))
    }
}

/// The datasheet formula above for one raw reading.
fn die_temperature_mc(raw: u16) -> i32 {
    let v_uv = i64::from(raw) * 3_300_000 / 4096;
    let t = 27_000 - (v_uv - 706_000) * 1000 / 1721;
    i32::try_from(t).unwrap_or(i32::MIN)
}

impl<P: AdcChannel> SampleSource for VideoAdc<P> {
    type Error = ConversionFailed;

    /// One blocking conversion of the video input (12-bit counts).
    fn read_sample(&mut self) -> Result<u16, ConversionFailed> {
        self.adc.read(&mut self.video).map_err(|_| ConversionFailed)
    }
}

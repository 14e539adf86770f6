//! The whole job for one frame: condition → find → calibrate → match → judge, into one [`Report`].
use super::config::Config;
use super::error::CheckError;
use super::line_shift::LineShift;
use super::stage::Stage;
use super::workspace::{MatchWork, Workspace, MAX_READINGS};
use crate::bounded::collect_bounded;
use crate::calibrate::{
    identify_with, mul_64x64, CalibrateError, HalfWidth, IdentifyConfig, IdentifyWork,
    ReferenceLine, WavelengthMap, MAX_REFERENCE_LINES,
};
use crate::condition::{condition_frame, FrameSum, GainTable};
use crate::find::{find_peaks, FindReport, Peak, PeakList, MAX_PEAKS};
use crate::judge::{
    MatchedLine, Mode, Reason, Report, SpeciesShare, UnexplainedPeak, MAX_UNEXPLAINED,
};
use crate::matching::assign::{assign_in_order, priority, Pair};
use crate::matching::catalogue::{build_into, CatalogueLine, MAX_NUCLEI};
use crate::matching::feature::{group_members, prior_share, settle_placed, Feature, MAX_FEATURES};
use crate::matching::isotope::{
    share_by_position, share_by_profile, BlendReading, PairWindow, ShareEstimate,
};
use crate::matching::line_pixels::LinePixels;
use crate::matching::markers::nearest_marker;
use crate::matching::{MatchError, MAX_CATALOGUE, MAX_SHARE_SIGMA_PPM};
use crate::predict::Nucleus;
use heapless::Vec;

/// FWHM / σ of a Gaussian, 2·√(2 ln 2), in Q16.
const FWHM_PER_SIGMA_Q16: i64 = 154_325;

/// A configured checker: the predicted lines for its sensor and profile are computed once here.
pub struct Checker {
    cfg: Config,
    priors: Vec<(Nucleus, u16), MAX_NUCLEI>,
    catalogue: Vec<CatalogueLine, MAX_CATALOGUE>,
    pair: Option<(Nucleus, Nucleus)>,
    /// What identification matches peaks against (from the catalogue and priors, so once here).
    refs: Vec<ReferenceLine, MAX_REFERENCE_LINES>,
    /// Verify mode: the features, the lines' pixels and the match windows on the stored map, which
    /// every frame would otherwise work out again (~120 k instructions on the M0); built in place.
    placed: Placed,
    /// Whether `placed` holds them (verify mode, grouping succeeded).
    placed_valid: bool,
    /// [`priority`] of `placed.features` (both modes): the order assignment visits a frame's
    /// features in whenever their rates are the stored grouping's (verify mode, and calibrate mode
    /// settled from the stored grouping), so no frame sorts them.
    placed_order: Vec<u8, MAX_FEATURES>,
    /// Per catalogue line, the first line with the same nucleus and transition (itself, on a
    /// catalogue without repeats): [`same`] is equality of these. Made in `configure`.
    same_as: [u8; MAX_CATALOGUE],
    /// Per line of the pair's first nucleus, its first line of the second nucleus with the same
    /// transition (`u8::MAX`: none); the isotope search asked this of the catalogue every frame.
    partner: [u8; MAX_CATALOGUE],
    /// The stored map's x and wavelength at the drift points (see [`DriftPoints`]), made once.
    drift_points: DriftPoints,
    /// Calibrate mode: the lines' stored pixels and interpolation weights, so a fitted map places
    /// them from five inversions (see [`LineShift`]). Made once.
    line_shift: LineShift,
}

/// Grouping's output on one map: see [`Checker::placed`](Checker).
struct Placed {
    features: Vec<Feature, MAX_FEATURES>,
    lines: LinePixels,
    windows: Vec<(i32, i32), MAX_FEATURES>,
    /// Per feature, the reach of its members on the stored map (px, Q16, ≤ 128 px; see
    /// [`blend_reach_px_q16`]): calibrate mode scales it to the fitted map (see [`scaled_window`]).
    reach_px_q16: Vec<i32, MAX_FEATURES>,
    /// The stored map's |slope| at its frame's centre (fm per px, Q16; 0: none), the scale's
    /// reference.
    mid_slope: u64,
}

/// The map a check measures with, and its uncertainty.
pub(super) struct MapInUse {
    map: WavelengthMap,
    fit: Option<crate::calibrate::MapFit>,
    stored_sigma_fm: u32,
    /// The catalogue lines' pixels on `map`, recorded by grouping.
    lines: LinePixels,
    /// `map`'s half-width reciprocal, for the many evaluations of one check.
    div: HalfWidth,
    /// The fit's σ as a polynomial in x (when it is the fit's own map), taken once per check.
    sigma_poly: Option<crate::calibrate::SigmaPoly>,
    /// Identification's per-peak x ([`IdentifyWork::peak_x_q30`]) are this check's peaks' x on
    /// `map` (its frame, these peaks); else they are worked out where needed. (A flag, not a copy:
    /// a `MapInUse` on `configure`'s stack stays small.)
    peak_x_valid: bool,
}

impl MapInUse {
    /// All zero, a placeholder in [`MatchWork`] until a check writes the frame's map (so a `static`
    /// holding the workspace stays in `.bss`, not in flash).
    pub(super) const EMPTY: MapInUse = MapInUse {
        map: WavelengthMap::ZERO,
        fit: None,
        stored_sigma_fm: 0,
        lines: LinePixels::new(),
        div: HalfWidth::ZERO,
        sigma_poly: None,
        peak_x_valid: false,
    };

    /// Takes `map` (and its fit) for this check, in place: the ≈ 700-byte value is never built on
    /// the stack and copied.
    fn set(
        &mut self,
        map: WavelengthMap,
        fit: Option<&crate::calibrate::MapFit>,
        stored_sigma_fm: u32,
    ) {
        let own = |f: &&crate::calibrate::MapFit| {
            f.map.center_px_q16 == map.center_px_q16
                && f.map.half_width_px_q16 == map.half_width_px_q16
        };
        self.sigma_poly = fit.filter(own).and_then(|f| f.sigma_poly());
        self.div = HalfWidth::forward(&map);
        self.map = map;
        self.fit = fit.copied();
        self.stored_sigma_fm = stored_sigma_fm;
        self.lines = LinePixels::new();
        self.peak_x_valid = false;
    }

    /// Marks identification's x (`xs`, on the frame of `pixels`' fitted maps) as the peaks' x on
    /// `map` when `map` is on that frame and there is one per peak.
    fn take_peak_x(&mut self, xs: &[i64], pixels: u16, peaks: usize) {
        let f = crate::calibrate::standard_frame(pixels);
        let frame = (self.map.center_px_q16, self.map.half_width_px_q16);
        self.peak_x_valid = frame == (f.center_px_q16, f.half_width_px_q16) && xs.len() == peaks;
    }

    /// The peaks' x on `map` from identification's `xs` when valid, else none.
    fn peak_xs<'x>(&self, xs: &'x [i64]) -> &'x [i64] {
        if self.peak_x_valid {
            xs
        } else {
            &[]
        }
    }

    /// Peak `k`'s x on `map`: `xs[k]` (from [`peak_xs`](Self::peak_xs)) where there is one, else
    /// divided now (the same integer).
    fn x_of_peak(&self, xs: &[i64], k: usize, pk: &Peak) -> i64 {
        match xs.get(k) {
            Some(&x) => x,
            None => self.map.x_q30_by(pk.center_px_q16, &self.div),
        }
    }

    fn sigma_fm(&self, p_q16: i32) -> u64 {
        match &self.fit {
            Some(f) => f.sigma_fm_at(p_q16),
            None => self.stored_sigma_fm as u64,
        }
    }

    /// (λ, |dλ/dp| (0 where the map cannot say), map σ) at one pixel `p_q16` whose x on `map` is
    /// `x`, as [`WavelengthMap::wavelength_fm`], [`WavelengthMap::slope_fm_per_px_q16`] and
    /// [`sigma_fm`] give them (one division, or none where x is known, instead of three).
    ///
    /// [`sigma_fm`]: Self::sigma_fm
    fn at_x(&self, p_q16: i32, x: i64) -> (Result<i64, CalibrateError>, u64, u64) {
        let (slope, sigma) = self.slope_sigma_at_x(p_q16, x);
        (self.map.wavelength_at_x(x), slope, sigma)
    }

    /// [`at_x`](Self::at_x) at a pixel, without the wavelength (match windows need only slope and
    /// σ): one Horner evaluation fewer, the same integers.
    fn slope_sigma(&self, p_q16: i32) -> (u64, u64) {
        self.slope_sigma_at_x(p_q16, self.map.x_q30_by(p_q16, &self.div))
    }

    /// Whether every feature on the sensor gets the narrowest line window (1 px) whatever its
    /// pixel: twice `max_line_error_fm` plus 3 map σ over the smallest |slope| is at most 1 px with
    /// the largest σ and the smallest |slope| on the sensor (see [`windows_px_q16`]).
    fn one_px_windows(&self, max_line_error_fm: u32) -> bool {
        let sigma_max = match &self.fit {
            None => Some(self.stored_sigma_fm as u64),
            Some(f)
                if f.map.center_px_q16 == self.map.center_px_q16
                    && f.map.half_width_px_q16 == self.map.half_width_px_q16 =>
            {
                self.sigma_poly.as_ref().and_then(|s| s.sigma_max_fm())
            }
            Some(_) => None,
        };
        let (Some(sigma), Some(slope)) = (sigma_max, self.map.min_abs_slope_on_sensor(&self.div))
        else {
            return false;
        };
        let Some(tol) = (sigma as i64)
            .checked_mul(3)
            .and_then(|t| t.checked_add(2 * max_line_error_fm as i64))
        else {
            return false;
        };
        (1..1 << 62).contains(&slope) && shl32_div(tol, slope as i64) <= 1 << 16
    }

    /// |slope| and σ of [`at_x`](Self::at_x).
    fn slope_sigma_at_x(&self, p_q16: i32, x: i64) -> (u64, u64) {
        let slope = self
            .map
            .slope_at_x_by(x, &self.div)
            .unwrap_or(0)
            .unsigned_abs();
        (slope, self.sigma_at_x(p_q16, x))
    }

    /// The identification's fit where it is this map and the peaks' x (see
    /// [`peak_xs`](Self::peak_xs)): its own (λ, slope) at its points serve the matched lines.
    fn fitted<'w>(&self, work: &'w IdentifyWork) -> Option<&'w IdentifyWork> {
        self.peak_x_valid.then_some(work)
    }

    /// σ of [`at_x`](Self::at_x).
    fn sigma_at_x(&self, p_q16: i32, x: i64) -> u64 {
        match &self.fit {
            // The fit's own map (as `map_for` builds it), so its x is this one: the same pixel and
            // frame (centre, half-width) give the same x.
            Some(f)
                if f.map.center_px_q16 == self.map.center_px_q16
                    && f.map.half_width_px_q16 == self.map.half_width_px_q16 =>
            {
                match self.sigma_poly.as_ref().and_then(|s| s.sigma_fm_at_x(x)) {
                    Some(v) => v,
                    None => f.sigma_fm_at_x(x),
                }
            }
            Some(f) => f.sigma_fm_at(p_q16),
            None => self.stored_sigma_fm as u64,
        }
    }
}

impl Checker {
    /// Validates the configuration and predicts the lines of the profile's species (and the
    /// isotope partner of a lone hydrogen species) over the sensor's range.
    ///
    /// The checker (≈ 4 KiB) comes back by value; on a small core, keep one in a `static` made with
    /// [`blank`](Self::blank) and call [`configure`](Self::configure), which predicts in place.
    ///
    /// Work: line prediction of ≤ 4 nuclei over the sensor window (the costly part, once).
    pub fn new(cfg: Config) -> Result<Checker, CheckError> {
        let mut c = Checker::blank(cfg.clone());
        c.configure(cfg)?;
        Ok(c)
    }

    /// A checker holding `cfg` but no predicted lines yet: [`check`](Self::check) refuses every
    /// frame with [`CheckError::NotConfigured`] until [`configure`](Self::configure) succeeds. A
    /// `const fn`, so a `static` can hold one.
    pub const fn blank(cfg: Config) -> Checker {
        Checker {
            cfg,
            priors: Vec::new(),
            catalogue: Vec::new(),
            pair: None,
            refs: Vec::new(),
            placed: Placed {
                features: Vec::new(),
                lines: LinePixels::new(),
                windows: Vec::new(),
                reach_px_q16: Vec::new(),
                mid_slope: 0,
            },
            placed_valid: false,
            placed_order: Vec::new(),
            same_as: [u8::MAX; MAX_CATALOGUE],
            partner: [u8::MAX; MAX_CATALOGUE],
            drift_points: DriftPoints::NONE,
            line_shift: LineShift::NONE,
        }
    }

    /// [`new`](Self::new) in place: validates `cfg` and predicts its lines into this checker, e.g.
    /// when the instrument's user picks another profile. On an error the checker is left
    /// [`blank`](Self::blank) (it refuses frames) with `cfg` stored.
    ///
    /// Work: as [`new`](Self::new).
    pub fn configure(&mut self, cfg: Config) -> Result<(), CheckError> {
        self.cfg = cfg;
        self.clear_predictions();
        let done = self.predict();
        if done.is_err() {
            self.clear_predictions();
        }
        done
    }

    /// Back to [`blank`](Self::blank)'s tables (the configuration stays).
    fn clear_predictions(&mut self) {
        self.priors.clear();
        self.catalogue.clear();
        self.pair = None;
        self.refs.clear();
        self.placed_valid = false;
        self.placed_order.clear();
        self.same_as = [u8::MAX; MAX_CATALOGUE];
        self.partner = [u8::MAX; MAX_CATALOGUE];
        self.drift_points = DriftPoints::NONE;
        self.line_shift = LineShift::NONE;
    }

    /// The prediction behind [`configure`](Self::configure), on cleared tables. Out of line: one
    /// copy of the prediction code whether a firmware calls `new`, `configure` or both.
    #[inline(never)]
    fn predict(&mut self) -> Result<(), CheckError> {
        let cfg = &self.cfg;
        cfg.profile.primary().ok_or(CheckError::BadConfig)?;
        if !(1..=3).contains(&cfg.degree) || cfg.line_fwhm_px_q8 == 0 || cfg.pixels < 16 {
            return Err(CheckError::BadConfig);
        }
        let priors = &mut self.priors;
        for s in cfg.profile.expected() {
            let mid = (s.min_share_permille as u32 + s.max_share_permille as u32) / 2;
            let _ = priors.push((s.nucleus, mid.max(1) as u16));
        }
        let hydrogen: Vec<Nucleus, MAX_NUCLEI> =
            collect_bounded(priors.iter().map(|p| p.0).filter(|n| n.z() == 1));
        self.pair = match hydrogen.as_slice() {
            [a, b, ..] => Some((*a, *b)),
            [a] => {
                let partner = if *a == Nucleus::H1 {
                    Nucleus::H2
                } else {
                    Nucleus::H1
                };
                let _ = priors.push((partner, 0));
                Some((*a, partner))
            }
            [] => None,
        };
        let (lo, hi) = sensor_range(cfg)?;
        let nuclei: Vec<Nucleus, MAX_NUCLEI> = collect_bounded(priors.iter().map(|p| p.0));
        build_into(&nuclei, lo, hi, &cfg.air, &mut self.catalogue)?;
        reference_lines(&self.catalogue, &self.priors, &mut self.refs);
        self.same_as = same_classes(&self.catalogue);
        self.drift_points
            .fill(&self.cfg.stored.map, self.cfg.pixels);
        if let Some((a, b)) = self.pair {
            self.partner = partners(&self.catalogue, a, b);
        }
        let mode = self.cfg.mode;
        if mode == Mode::Verify {
            self.placed_valid = self.place_on_stored();
        }
        // Calibrate mode: the stored map's line pixels, where a calibration moves the lines from.
        if mode == Mode::Calibrate && self.place_on_stored() {
            self.line_shift.fill(
                &self.cfg.stored.map,
                &self.catalogue,
                (&self.placed.lines, &self.placed.features),
                self.cfg.pixels,
            );
        }
        self.placed_order = priority(&self.placed.features);
        Ok(())
    }

    /// Verify mode's grouping on the stored map into `placed`, once (see [`Checker::placed`](Checker)):
    /// exactly what [`match_lines`](Self::match_lines) would work out per frame. `false` where
    /// grouping fails; then each frame groups (and reports the failure) itself.
    #[inline(never)]
    fn place_on_stored(&mut self) -> bool {
        let Checker {
            cfg,
            catalogue,
            priors,
            placed,
            ..
        } = self;
        let mut m = MapInUse::EMPTY;
        m.set(cfg.stored.map, None, cfg.stored.sigma_fm);
        let Placed {
            features,
            lines,
            windows,
            reach_px_q16,
            mid_slope,
        } = placed;
        reach_px_q16.clear();
        *mid_slope = 0;
        if group_with_windows(cfg, catalogue, priors, &mut m, features, windows, None).is_err() {
            return false;
        }
        for f in features.iter() {
            let far = farthest_member_fm(catalogue, f).unwrap_or(0);
            let reach = blend_reach_px_q16(far, &m, f.predicted_px_q16).clamp(0, 128 << 16);
            let _ = reach_px_q16.push(reach as i32);
        }
        *mid_slope = m.map.slope_at_x_by(0, &m.div).map_or(0, i64::unsigned_abs);
        *lines = m.lines;
        true
    }

    /// Drops the verify-mode grouping made in `configure`, so each frame groups itself (tests
    /// compare the two); whether there was one.
    #[cfg(test)]
    pub(super) fn forget_placement(&mut self) -> bool {
        core::mem::replace(&mut self.placed_valid, false)
    }

    /// Drops calibrate mode's line shift made in `configure`, so each frame inverts the fitted map
    /// for every line (tests compare the two); whether there was one.
    #[cfg(test)]
    pub(super) fn forget_line_shift(&mut self) -> bool {
        let had = self.line_shift.is_made();
        self.line_shift = LineShift::NONE;
        had
    }

    /// Calibrate mode's line shift (tests ask whether a fitted map takes it).
    #[cfg(test)]
    pub(super) fn line_shift(&self) -> &LineShift {
        &self.line_shift
    }

    /// The configuration.
    pub fn config(&self) -> &Config {
        &self.cfg
    }

    /// The predicted lines on the sensor, by wavelength.
    pub fn catalogue(&self) -> &[CatalogueLine] {
        &self.catalogue
    }

    /// Checks one frame into `report` (overwritten). `signal` (and `dark`) are raw readouts or
    /// co-added sums; `work` holds buffers for the configured pixel count.
    ///
    /// Work, for N pixels and the fixed capacities (64 peaks, 48 predicted lines, 40 features):
    /// conditioning and peak finding O(N) (see [`condition_frame`] and [`find_peaks`], whose fits share
    /// a budget of [`STEP_BUDGET`](crate::find::STEP_BUDGET) Gauss–Newton steps); the bounded search of
    /// [`identify()`](crate::calibrate::identify()) (≤ 2 280 hypotheses, each scored on ≤ 16 peaks) at most once: in calibrate
    /// modes for the map, in verify mode to test for a shifted scale when at least two more peaks
    /// were found than lines matched (or fewer lines matched than the profile needs); matching ≤ 40 features × 64 peaks and ≤ 64 × 40 × 4 member tests, with ≤ 338
    /// map inversions (≤ 12 Newton steps each); one isotope pair fit of ≤ 615 pair and ≤ 379
    /// single-line steps × ≤ 64 px ([`share_by_profile`]); leftovers ≤ 64 peaks × (40 pairs + 27
    /// markers); judging ≤ 40 lines and ≤ 3 species × 40 pairs × 4 members.
    pub fn check(
        &self,
        signal: FrameSum<'_>,
        dark: Option<FrameSum<'_>>,
        gain: Option<GainTable<'_>>,
        work: Workspace<'_>,
        report: &mut Report,
    ) -> Result<(), CheckError> {
        self.check_traced(signal, dark, gain, work, report, |_| {})
    }

    /// [`check`](Self::check), calling `at` after each [`Stage`] the frame reaches (for timing or a
    /// progress display; the result is the same). Work as for `check`.
    pub fn check_traced(
        &self,
        signal: FrameSum<'_>,
        dark: Option<FrameSum<'_>>,
        gain: Option<GainTable<'_>>,
        work: Workspace<'_>,
        report: &mut Report,
        mut at: impl FnMut(Stage),
    ) -> Result<(), CheckError> {
        let cfg = &self.cfg;
        if self.catalogue.is_empty() {
            return Err(CheckError::NotConfigured);
        }
        if signal.len() != cfg.pixels as usize {
            return Err(CheckError::WrongPixelCount);
        }
        let mut work = work;
        let found = self.find_stage(signal, dark, gain, &mut work, &mut at)?;
        let Workspace {
            frame,
            scratch,
            peaks,
            matching,
            ..
        } = work;
        let peaks: &PeakList = peaks;
        let base = scratch.get(..frame.len()).unwrap_or(&[]);
        report.clear();
        report.mode = cfg.mode;
        report.truncated = found.truncated;
        report.scores.peaks = peaks.len() as u8;
        report.scores.noise_q8 = found.noise_typical_q8;
        if found.truncated {
            report.note(Reason::PeakListTruncated);
        }
        // Over half the pixels untrusted (a saturated dark, a flooded sensor): nothing to judge by.
        let untrusted_permille =
            (found.untrusted_pixels as u32 * 1000 / (found.pixels.max(1) as u32)) as u16;
        if untrusted_permille > 500 {
            report.map = Some(cfg.stored.map);
            report.note(Reason::FrameUnusable { untrusted_permille });
            report.decide();
            return Ok(());
        }
        if peaks.is_empty() {
            report.map = Some(cfg.stored.map);
            report.note(Reason::NoLines);
            report.decide();
            return Ok(());
        }
        // The map in use lives in the caller's workspace (≈ 700 B), written in place.
        if !self.map_for(peaks, report, &mut matching.map, &mut matching.identify) {
            // Calibration failed: list every peak on the stored map so the user sees what was there.
            let slot = &mut matching.map;
            slot.set(cfg.stored.map, None, cfg.stored.sigma_fm);
            self.unexplained(peaks, &[], slot, &[], report);
            report.decide();
            return Ok(());
        }
        report.map = Some(matching.map.map);
        at(Stage::Calibrated);
        self.match_lines(peaks, (frame, base), matching, report)?;
        // Called from here, not from `match_lines`: its frame and identification's are not stacked.
        if cfg.mode == Mode::Verify && self.shifted_scale(peaks, report, &mut matching.identify) {
            // The stored scale explains the peaks worse than a shifted one: said in the reasons.
        }
        at(Stage::Matched);
        self.judge(&matching.features, &matching.pairs, peaks, report);
        report.decide();
        at(Stage::Judged);
        Ok(())
    }

    /// Conditioning and peak finding into `work`. Out of line, as [`match_lines`](Self::match_lines).
    #[inline(never)]
    fn find_stage(
        &self,
        signal: FrameSum<'_>,
        dark: Option<FrameSum<'_>>,
        gain: Option<GainTable<'_>>,
        work: &mut Workspace<'_>,
        at: &mut impl FnMut(Stage),
    ) -> Result<FindReport, CheckError> {
        let cfg = &self.cfg;
        let info = condition_frame(&cfg.condition, signal, dark, gain, work.frame, work.flags)?;
        at(Stage::Conditioned);
        let mut fcfg = cfg.find;
        if fcfg.shot_var_per_unit_q16.is_none() {
            fcfg.shot_var_per_unit_q16 = info.shot_var_per_unit_q16;
        }
        let found = find_peaks(
            &fcfg,
            work.frame,
            work.flags,
            work.scratch,
            work.find,
            work.peaks,
        )?;
        at(Stage::PeaksFound);
        Ok(found)
    }

    /// Matching and isotope shares on the map in `work` (pairs kept there for judging); `rows` are
    /// the frame and its baseline. Out of line: its locals are not on the stack while peak finding
    /// and identification run below [`check`](Self::check).
    #[inline(never)]
    fn match_lines(
        &self,
        peaks: &PeakList,
        rows: (&[i32], &[i32]),
        work: &mut MatchWork,
        report: &mut Report,
    ) -> Result<(), CheckError> {
        let cfg = &self.cfg;
        let MatchWork {
            features,
            map: in_use,
            pairs: kept,
            readings,
            windows,
            identify,
        } = work;
        if self.placed_valid && cfg.mode == Mode::Verify {
            // Verify mode measures on the stored map: its grouping was made once, in `configure`.
            let p = &self.placed;
            features.clear();
            let _ = features.extend_from_slice(&p.features);
            in_use.lines = p.lines.clone();
            windows.clear();
            let _ = windows.extend_from_slice(&p.windows);
        } else {
            // Calibrate mode: the fitted map's line pixels moved from the stored ones (grouping
            // inverts the rest), and the stored grouping's settling where the members agree.
            let from_stored =
                (cfg.mode == Mode::Calibrate).then_some((&self.line_shift, &self.placed));
            group_with_windows(
                cfg,
                &self.catalogue,
                &self.priors,
                in_use,
                features,
                windows,
                from_stored,
            )?;
        }
        let in_use: &MapInUse = in_use;
        let window_of = |i: usize| windows.get(i).copied().unwrap_or((1 << 16, 1 << 16));
        let pairs = if same_rates(features, &self.placed.features) {
            assign_in_order(features, &self.placed_order, peaks, |i, _| window_of(i).1)
        } else {
            assign_in_order(features, &priority(features), peaks, |i, _| window_of(i).1)
        };
        let pairs = self.split_resolved(features, pairs, peaks, in_use, |i| window_of(i).0);
        let estimate = self.isotope(features, &pairs, peaks, in_use, rows, readings);
        let shares = self.shares(estimate);
        // Grouping settled every feature on the priors: with the same shares settling again
        // gives the same features.
        if shares != self.priors {
            let hw = HalfWidth::reciprocal(&in_use.map);
            for f in features.iter_mut() {
                settle_placed(f, &self.catalogue, &in_use.map, &hw, &shares, &in_use.lines)?;
            }
        }
        let xs = in_use.peak_xs(identify.peak_x_q30());
        self.fill_lines(
            features,
            &pairs,
            peaks,
            (in_use, xs, in_use.fitted(identify)),
            estimate.is_some(),
            report,
        )?;
        self.unexplained(peaks, &pairs, in_use, xs, report);
        self.report_shares(estimate, report);
        *kept = pairs;
        Ok(())
    }

    /// The map for this frame into `slot`: the stored one (verify) or one fitted to the peaks
    /// (calibrate modes); `false` (and `slot` left as it was) when calibration failed.
    fn map_for(
        &self,
        peaks: &PeakList,
        report: &mut Report,
        slot: &mut MapInUse,
        work: &mut IdentifyWork,
    ) -> bool {
        let cfg = &self.cfg;
        let stored_sigma_fm = cfg.stored.sigma_fm;
        if cfg.mode == Mode::Verify {
            slot.set(cfg.stored.map, None, stored_sigma_fm);
            return true;
        }
        let refs = &self.refs;
        let nominal = if cfg.mode == Mode::Calibrate {
            Some(cfg.stored.map)
        } else {
            None
        };
        let icfg = IdentifyConfig::new(cfg.pixels, cfg.degree, nominal);
        let found = identify_with(peaks, refs, &icfg, work).map(|id| {
            report.fit_rms_fm = Some(id.fit.rms_residual_fm);
            report.drift_fm = self
                .drift_points
                .drift_fm(&id.fit.map, &cfg.stored.map, cfg.pixels);
            slot.set(id.fit.map, Some(&id.fit), stored_sigma_fm);
        });
        match found {
            Ok(()) => {
                // The fitted map's x at each peak, worked out by identification.
                slot.take_peak_x(work.peak_x_q30(), cfg.pixels, peaks.len());
                true
            }
            Err(e) => {
                report.note(Reason::Calibration(e));
                false
            }
        }
    }

    /// Share of the pair's second nucleus, or `None` when not determinable here.
    fn isotope(
        &self,
        features: &[Feature],
        pairs: &[Pair],
        peaks: &[Peak],
        m: &MapInUse,
        (frame, base): (&[i32], &[i32]),
        readings: &mut Vec<BlendReading, MAX_READINGS>,
    ) -> Option<ShareEstimate> {
        let (a, _) = self.pair?;
        // The instrument's configured line width: measured widths of this frame's lines are pulled
        // up by the very pairs being split. The pair fit refines it by ±8 %.
        let sigma = ((((self.cfg.line_fwhm_px_q8 as i64) << 8) << 16) / FWHM_PER_SIGMA_Q16) as i32;
        let fwhm_q16 = (sigma as i64 * FWHM_PER_SIGMA_Q16) >> 16;
        // The strongest transition with both isotopes predicted and some peak matched to either.
        // (strength, line a, line b, their catalogue indices)
        let mut best: Option<(u64, &CatalogueLine, &CatalogueLine, u8, u8)> = None;
        readings.clear();
        // The first pair (by position) holding each line, by `same_as` class: what searching the
        // pairs for a member `same` as a line finds, from one pass over the pairs.
        let first = first_pairs(pairs, features, &self.same_as);
        let first_of = |i: usize| {
            self.same_as
                .get(i)
                .and_then(|&c| first.get(c as usize))
                .copied()
                .unwrap_or(u8::MAX)
        };
        for (ia, la) in self
            .catalogue
            .iter()
            .enumerate()
            .filter(|(_, l)| l.nucleus == a)
        {
            let ib = self.partner.get(ia).copied().unwrap_or(u8::MAX) as usize;
            let Some(lb) = self.catalogue.get(ib) else {
                continue;
            };
            let at = first_of(ia).min(first_of(ib));
            let Some(pair) = pairs.get(at as usize) else {
                continue;
            };
            let strength = la.strength as u64;
            if best.is_none_or(|(s, ..)| strength > s) {
                best = Some((strength, la, lb, ia as u8, ib as u8));
            }
            // Unresolved blends carry the share in their position (verify mode only).
            let feature = features.get(pair.feature as usize)?;
            let both = feature
                .members
                .iter()
                .filter_map(|&i| self.catalogue.get(i as usize))
                .filter(|c| same(c, la) || same(c, lb))
                .count()
                == 2;
            // Readings are read in verify mode only; elsewhere they are not taken where taking them
            // cannot fail (its slope's failure ends the search, so it is still asked elsewhere).
            let needed =
                |pk: &Peak| self.cfg.mode == Mode::Verify || !m.map.slope_sure_at(pk.center_px_q16);
            if both {
                if let Some(pk) = peaks.get(pair.peak as usize).filter(|pk| needed(pk)) {
                    // λ and slope of the peak's pixel from one x (the same integers as the
                    // pixel-taking calls, one division through the half-width's reciprocal).
                    let x = m.map.x_q30_by(pk.center_px_q16, &m.div);
                    let Ok(measured) = m.map.wavelength_at_x(x) else {
                        continue;
                    };
                    let slope = m.map.slope_at_x_by(x, &m.div).ok()?.unsigned_abs();
                    let sigma_fm = (mul_64x64(pk.center_sigma_px_q16 as u64, slope) >> 32) as u64;
                    let _ = readings.push(BlendReading {
                        measured_fm: measured,
                        sigma_fm,
                        a_fm: la.wavelength_fm,
                        b_fm: lb.wavelength_fm,
                    });
                }
            }
        }
        let (_, la, lb, ia, ib) = best?;
        let pa = m.lines.get(ia, la, &m.map)?;
        let pb = m.lines.get(ib, lb, &m.map)?;
        let sep = (pb as i64 - pa as i64).abs();
        // On a map fitted to the tube itself only a pair that peak finding sees as two lines can tell
        // a mix: one peak there is one line of either isotope.
        let (lo, hi) = (pa.min(pb) as i64 - fwhm_q16, pa.max(pb) as i64 + fwhm_q16);
        let seen = peaks
            .iter()
            .filter(|p| (lo..=hi).contains(&(p.center_px_q16 as i64)))
            .count();
        if self.cfg.mode != Mode::Verify && seen < 2 {
            return None;
        }
        let estimate = if 2 * sep >= fwhm_q16 {
            let slope = m.map.slope_fm_per_px_q16(pa).ok()?.unsigned_abs().max(1) as i64;
            let range = match self.cfg.mode {
                Mode::Verify => ((3 * m.sigma_fm(pa) as i64) << 32) / slope + (1 << 14),
                // A self-fitted map carries no isotope information in its positions: search past the
                // separation so a lone line of either isotope shows up as ambiguous.
                _ => sep + (1 << 16),
            };
            share_by_profile(&PairWindow {
                frame,
                base,
                a_px_q16: pa,
                b_px_q16: pb,
                sigma_px_q16: sigma,
                shift_range_px_q16: range.clamp(0, 4 << 16) as i32,
            })
        } else if self.cfg.mode == Mode::Verify {
            share_by_position(readings, self.cfg.stored.sigma_fm as u64)
        } else {
            None
        };
        estimate.filter(|e| e.sigma_ppm <= MAX_SHARE_SIGMA_PPM)
    }

    /// Per-nucleus shares (‰) for settling features: the estimate where there is one, else the priors.
    fn shares(&self, estimate: Option<ShareEstimate>) -> Vec<(Nucleus, u16), MAX_NUCLEI> {
        let mut out = self.priors.clone();
        if let (Some((a, b)), Some(e)) = (self.pair, estimate) {
            let fb = (e.share_b_ppm.clamp(0, 1_000_000) / 1000) as u16;
            for (n, s) in out.iter_mut() {
                if *n == a {
                    *s = 1000 - fb;
                } else if *n == b {
                    *s = fb;
                }
            }
        }
        out
    }

    /// A blend that the sensor resolves after all shows as two peaks: the peak left over next to a
    /// matched multi-line feature is that feature's other member, not a foreign line. Out of line:
    /// its member spans stay off `match_lines`' frame, which the isotope fit's deep calls sit under.
    #[inline(never)]
    fn split_resolved(
        &self,
        features: &[Feature],
        mut pairs: Vec<Pair, 40>,
        peaks: &[Peak],
        m: &MapInUse,
        line_window_px_q16: impl Fn(usize) -> i32,
    ) -> Vec<Pair, 40> {
        let matched: Vec<Pair, 40> = pairs.clone();
        // Each matched multi-line feature's member pixels, lowest and highest (whole px, widened by
        // one), once: a peak more than 64 px outside them is nearer no member than that, whatever the
        // window (a crowded frame has dozens of left-over peaks, each otherwise placed against every
        // member). Empty spans (lo > hi) mark single-line features.
        let spans: Vec<(i16, i16), 40> = collect_bounded(matched.iter().map(|p| {
            features
                .get(p.feature as usize)
                .and_then(|f| self.member_span_px(f, m))
                .unwrap_or((1, 0))
        }));
        let taken = Taken::of(&matched);
        for (k, pk) in peaks.iter().enumerate() {
            if taken.has(k, &matched) {
                continue;
            }
            let hit = matched.iter().zip(spans.iter()).find(|(p, &span)| {
                if beyond_span(pk.center_px_q16, span) {
                    return false;
                }
                features.get(p.feature as usize).is_some_and(|f| {
                    // The window is at most 64 px: beyond that it need not be worked out.
                    self.nearest_member(f, pk, m).is_some_and(|(_, d)| {
                        d <= 64 << 16 && d <= line_window_px_q16(p.feature as usize)
                    })
                })
            });
            let hit = hit.map(|(p, _)| p);
            if let Some(p) = hit {
                let _ = pairs.push(Pair {
                    feature: p.feature,
                    peak: k as u8,
                });
            }
        }
        crate::sort::sort_by_key(&mut pairs, |p| p.peak);
        pairs
    }

    /// [`span_px`] of a multi-line feature's placed members; `None` for a single-line feature or
    /// one with no member placed.
    #[inline(never)]
    fn member_span_px(&self, f: &Feature, m: &MapInUse) -> Option<(i16, i16)> {
        if f.members.len() < 2 {
            return None;
        }
        span_px(f.members.iter().filter_map(|&i| {
            let c = self.catalogue.get(i as usize)?;
            m.lines.get(i, c, &m.map)
        }))
    }

    /// The member line of a feature nearest to a peak, with the distance (px, Q16).
    fn nearest_member<'c>(
        &'c self,
        f: &Feature,
        pk: &Peak,
        m: &MapInUse,
    ) -> Option<(&'c CatalogueLine, i32)> {
        let mut best: Option<(&CatalogueLine, i32)> = None;
        for &i in f.members.iter() {
            let Some(c) = self.catalogue.get(i as usize) else {
                continue;
            };
            let Some(px) = m.lines.get(i, c, &m.map) else {
                continue;
            };
            let d = px.saturating_sub(pk.center_px_q16).saturating_abs();
            if best.is_none_or(|(_, bd)| d < bd) {
                best = Some((c, d));
            }
        }
        best
    }

    /// The matched lines into `report`; `(m, xs, fitted)`: the map in use, the peaks' x on it where
    /// known (see [`MapInUse::peak_xs`]) and the identification whose fit it is (its λ and slope at
    /// the fitted peaks; see [`MapInUse::fitted`]).
    fn fill_lines(
        &self,
        features: &[Feature],
        pairs: &[Pair],
        peaks: &[Peak],
        (m, xs, fitted): (&MapInUse, &[i64], Option<&IdentifyWork>),
        share_known: bool,
        report: &mut Report,
    ) -> Result<(), CheckError> {
        // Pairs per feature (a feature matched twice is a resolved blend), and which features have
        // another within 2.5 line widths: once for all pairs.
        let mut matched = [0u8; MAX_FEATURES];
        for p in pairs {
            if let Some(n) = matched.get_mut(p.feature as usize) {
                *n = n.saturating_add(1);
            }
        }
        let fwhm_q16 = (self.cfg.line_fwhm_px_q8 as i64) << 8;
        let near = crowded_features(features, fwhm_q16);
        for p in pairs {
            let (Some(f), Some(pk)) =
                (features.get(p.feature as usize), peaks.get(p.peak as usize))
            else {
                continue;
            };
            let resolved = matched.get(p.feature as usize).is_some_and(|&n| n > 1);
            let (line, predicted) = if resolved {
                match self.nearest_member(f, pk, m) {
                    Some((c, _)) => (c, c.wavelength_fm),
                    None => continue,
                }
            } else {
                match self.catalogue.get(f.primary as usize) {
                    Some(c) => (c, f.predicted_fm),
                    None => continue,
                }
            };
            let x = m.x_of_peak(xs, p.peak as usize, pk);
            let (measured, slope, s) = match fitted.and_then(|w| w.peak_eval(p.peak as usize)) {
                // The fit's own (λ, slope) at this peak: what `at_x` works out from the same x.
                Some((lam, slope)) => (
                    Ok(lam),
                    slope.unsigned_abs(),
                    m.sigma_at_x(pk.center_px_q16, x),
                ),
                None => m.at_x(pk.center_px_q16, x),
            };
            let Ok(measured) = measured else {
                continue;
            };
            // σ_px · |slope| in 64 × 64-bit pieces: the u128 product.
            let c = mul_64x64(pk.center_sigma_px_q16 as u64, slope) >> 32;
            let s = s as u128;
            // A line within 2.5 line widths of another feature (series-limit crowding) or sharing its
            // peak with another transition is identified, but its centre is pulled by the neighbour:
            // its position is not judged.
            let crowded = (p.feature < 64 && near & (1 << p.feature) != 0)
                || f.members
                    .iter()
                    .filter_map(|&i| self.catalogue.get(i as usize))
                    .any(|c| (c.lower, c.upper) != (line.lower, line.upper));
            let judged = if crowded {
                0
            } else if !resolved && !share_known && f.members.len() > 1 {
                self.blend_error(f, measured)
            } else {
                measured - predicted
            };
            let _ = report.lines.push(MatchedLine {
                nucleus: line.nucleus,
                lower: line.lower,
                upper: line.upper,
                predicted_fm: predicted,
                measured_fm: measured,
                center_px_q16: pk.center_px_q16,
                sigma_fm: root_sum_squares(c, s),
                judged_error_fm: judged,
                snr_q8: pk.snr_q8,
                blended: pk.blended || crowded || (f.members.len() > 1 && !resolved),
                saturated: pk.saturated,
                crowded,
            });
        }
        crate::sort::sort_by_key(&mut report.lines, |l| l.measured_fm);
        Ok(())
    }

    /// Lists unmatched peaks (the strongest when more than fit) with foreign-line hints.
    /// `xs`: the peaks' x on `m`'s map where known (see [`MapInUse::peak_xs`]).
    fn unexplained(
        &self,
        peaks: &[Peak],
        pairs: &[Pair],
        m: &MapInUse,
        xs: &[i64],
        report: &mut Report,
    ) {
        let mut total: i128 = 0;
        let mut foreign: i128 = 0;
        let taken = Taken::of(pairs);
        for (k, pk) in peaks.iter().enumerate() {
            let area = pk.area.max(0) as i128;
            total += area;
            if taken.has(k, pairs) {
                continue;
            }
            foreign += area;
            // Full, and no brighter than the faintest listed: the push below would drop it, so it
            // is not placed (64 noise peaks cost 24 placements, not 64).
            if dropped_when_full(&report.unexplained, pk.snr_q8) {
                continue;
            }
            // λ and |slope| (0 where the map cannot say) from one x, as the pixel-taking calls.
            let x = m.x_of_peak(xs, k, pk);
            let Ok(w) = m.map.wavelength_at_x(x) else {
                continue;
            };
            let slope = m.map.slope_at_x_by(x, &m.div).unwrap_or(0).unsigned_abs() as i64;
            let window = (3 * (slope >> 16)).max(300_000);
            let entry = UnexplainedPeak {
                wavelength_fm: w,
                center_px_q16: pk.center_px_q16,
                snr_q8: pk.snr_q8,
                hint: nearest_marker(w, window),
            };
            // Full: the faintest listed peak gives way to a brighter one.
            crate::bounded::push_keep_strongest(&mut report.unexplained, entry, |u| u.snr_q8);
        }
        crate::sort::sort_by_key(&mut report.unexplained, |u| u.wavelength_fm);
        report.scores.unexplained_permille = if total > 0 {
            div_i128(foreign * 1000, total) as u16
        } else {
            0
        };
    }

    fn report_shares(&self, estimate: Option<ShareEstimate>, report: &mut Report) {
        let count =
            |n: Nucleus, r: &Report| r.lines.iter().filter(|l| l.nucleus == n).count() as u8;
        match (self.pair, estimate) {
            (Some((a, b)), Some(e)) => {
                let fb = e.share_b_ppm.clamp(0, 1_000_000) as u32;
                let la = count(a, report);
                let lb = count(b, report);
                let _ = report.shares.push(SpeciesShare {
                    nucleus: a,
                    share_ppm: Some(1_000_000 - fb),
                    sigma_ppm: Some(e.sigma_ppm),
                    lines: la,
                });
                let _ = report.shares.push(SpeciesShare {
                    nucleus: b,
                    share_ppm: Some(fb),
                    sigma_ppm: Some(e.sigma_ppm),
                    lines: lb,
                });
            }
            (Some((a, b)), None) => {
                for n in [a, b] {
                    let l = count(n, report);
                    let _ = report.shares.push(SpeciesShare {
                        nucleus: n,
                        share_ppm: None,
                        sigma_ppm: None,
                        lines: l,
                    });
                }
                report.note(Reason::IsotopeNotDeterminable);
            }
            (None, _) => {}
        }
        for s in self.cfg.profile.expected().filter(|s| s.nucleus.z() != 1) {
            let l = count(s.nucleus, report);
            let share = if l > 0 { Some(1_000_000) } else { None };
            let _ = report.shares.push(SpeciesShare {
                nucleus: s.nucleus,
                share_ppm: share,
                sigma_ppm: None,
                lines: l,
            });
        }
    }

    /// Verify mode: does a shifted or rescaled stored map explain clearly more peaks? Then the
    /// instrument's scale, not the tube, is off. Adds the drift finding and returns true.
    fn shifted_scale(
        &self,
        peaks: &PeakList,
        report: &mut Report,
        work: &mut IdentifyWork,
    ) -> bool {
        let cfg = &self.cfg;
        let matched = report.lines.len();
        if matched >= peaks.len() || peaks.len() < 3 {
            return false;
        }
        // Identification pairs each peak at most once, so it cannot return more pairs than there are
        // peaks: when even that many could not pass the test below, the search is skipped (exact).
        let rescue = matched < cfg.profile.min_lines as usize;
        if peaks.len() < matched + 2 && !rescue {
            return false;
        }
        let refs = &self.refs;
        let icfg = IdentifyConfig::new(cfg.pixels, cfg.degree, Some(cfg.stored.map));
        let Ok(id) = identify_with(peaks, refs, &icfg, work) else {
            return false;
        };
        if id.pairs.len() < matched + 2 && !(rescue && id.pairs.len() >= 3) {
            return false;
        }
        let Some(drift) = self
            .drift_points
            .drift_fm(&id.fit.map, &cfg.stored.map, cfg.pixels)
        else {
            return false;
        };
        if drift.unsigned_abs() > cfg.profile.max_line_error_fm as u64 {
            report.drift_fm = Some(drift);
            report.note(Reason::InstrumentDrift { drift_fm: drift });
            return true;
        }
        false
    }

    fn judge(&self, features: &[Feature], pairs: &[Pair], peaks: &[Peak], report: &mut Report) {
        let prof = &self.cfg.profile;
        let expected = |n: Nucleus| prof.expected().any(|s| s.nucleus == n);
        let lines_expected = report.lines.iter().filter(|l| expected(l.nucleus)).count() as u8;
        report.scores.lines_matched = lines_expected;
        let best_snr = report.lines.iter().map(|l| l.snr_q8).max().unwrap_or(0);
        report.scores.best_snr_q8 = best_snr;
        let mut dim = false;
        if best_snr < prof.min_snr_q8 {
            dim = true;
            let strongest = peaks.iter().map(|p| p.snr_q8).max().unwrap_or(0);
            report.note(Reason::TooDim {
                snr_q8: best_snr.max(strongest.min(best_snr)),
                min_q8: prof.min_snr_q8,
            });
        }
        let clipped = report.lines.iter().filter(|l| l.saturated).count() as u8;
        if clipped > 0 && !prof.allow_saturation {
            report.note(Reason::Saturated { lines: clipped });
        }
        if !dim && lines_expected < prof.min_lines && report.drift_fm.is_none() {
            report.note(Reason::TooFewLines {
                found: lines_expected,
                needed: prof.min_lines,
            });
        }
        for s in prof.expected().filter(|s| s.min_share_permille > 0) {
            let present = pairs.iter().any(|p| {
                features.get(p.feature as usize).is_some_and(|f| {
                    f.members.iter().any(|&i| {
                        self.catalogue
                            .get(i as usize)
                            .is_some_and(|c| c.nucleus == s.nucleus)
                    })
                })
            });
            if !present && !dim && report.drift_fm.is_none() {
                report.note(Reason::SpeciesMissing(s.nucleus));
            }
        }
        // Position errors; a line is off when its judged error exceeds the allowance by more than
        // 3 σ of its own measurement.
        let (mut sum_e, mut sum_e2, mut max_e, mut n_e) = (0i128, 0i128, 0u64, 0i128);
        let mut worst: Option<(u64, MatchedLine)> = None;
        for line in report.lines.iter() {
            let e = line.judged_error_fm;
            if !line.crowded {
                sum_e += line.error_fm() as i128;
                sum_e2 += (line.error_fm() as i128) * (line.error_fm() as i128);
                n_e += 1;
            }
            max_e = max_e.max(e.unsigned_abs());
            let excess = e
                .unsigned_abs()
                .saturating_sub(prof.max_line_error_fm as u64 + 3 * line.sigma_fm);
            if excess > 0 && worst.is_none_or(|(x, _)| excess > x) {
                worst = Some((
                    excess,
                    MatchedLine {
                        predicted_fm: line.measured_fm - e,
                        ..*line
                    },
                ));
            }
        }
        report.scores.max_abs_error_fm = max_e;
        if n_e > 0 {
            report.scores.rms_error_fm =
                crate::fixed::isqrt_u128(div_i128(sum_e2, n_e) as u128) as u64;
        }
        if report.drift_fm.is_none() {
            if let Some((_, w)) = worst {
                report.note(Reason::LineOffPosition {
                    nucleus: w.nucleus,
                    lower: w.lower,
                    upper: w.upper,
                    error_fm: w.error_fm(),
                });
            }
        }
        if n_e >= 3 && self.cfg.mode == Mode::Verify {
            let mean = (sum_e / n_e) as i64;
            if mean.unsigned_abs() * 2 > prof.max_line_error_fm as u64 {
                report.note(Reason::SystematicShift {
                    mean_error_fm: mean,
                });
            }
        }
        if report.scores.unexplained_permille > prof.max_unexplained_permille
            && !dim
            && report.drift_fm.is_none()
        {
            report.note(Reason::ForeignLight {
                permille: report.scores.unexplained_permille,
            });
        }
        // Shares against the profile: inside the range passes; outside by more than 2 σ fails; outside
        // but within 2 σ of it cannot be decided.
        for sh in report.shares.clone().iter() {
            let Some(exp) = prof.expected().find(|s| s.nucleus == sh.nucleus) else {
                continue;
            };
            match (sh.share_ppm, sh.sigma_ppm) {
                (Some(v), Some(sg)) => {
                    let (lo, hi) = (
                        exp.min_share_permille as i64 * 1000,
                        exp.max_share_permille as i64 * 1000,
                    );
                    let (v, two) = (v as i64, 2 * sg as i64);
                    if v + two < lo || v - two > hi {
                        report.note(Reason::ShareOutOfRange {
                            nucleus: sh.nucleus,
                            share_permille: (v / 1000) as u16,
                        });
                    } else if v < lo || v > hi {
                        report.note(Reason::ShareUncertain {
                            nucleus: sh.nucleus,
                        });
                    }
                }
                _ if sh.nucleus.z() == 1 && prof.isotope_required && exp.min_share_permille > 0 => {
                    report.note(Reason::ShareUncertain {
                        nucleus: sh.nucleus,
                    });
                }
                _ => {}
            }
        }
        if let (Some(d), true) = (report.drift_fm, self.cfg.mode != Mode::Verify) {
            if d.unsigned_abs() > prof.max_drift_fm as u64 {
                report.note(Reason::InstrumentDrift { drift_fm: d });
            }
        }
    }

    /// Error of a blend whose share is unknown: distance from the measured position to the range of
    /// positions the profile's shares allow (0 inside it).
    fn blend_error(&self, f: &Feature, measured: i64) -> i64 {
        let Some((a, b)) = self.pair else {
            return measured - f.predicted_fm;
        };
        let members: Vec<&CatalogueLine, 4> = collect_bounded(
            f.members
                .iter()
                .filter_map(|&i| self.catalogue.get(i as usize)),
        );
        let la = members.iter().find(|c| c.nucleus == a);
        let lb = members.iter().find(|c| c.nucleus == b);
        let (Some(la), Some(lb)) = (la, lb) else {
            return measured - f.predicted_fm;
        };
        let range = self
            .cfg
            .profile
            .expected()
            .find(|s| s.nucleus == b)
            .map_or((0, 1000), |s| (s.min_share_permille, s.max_share_permille));
        let at = |fb: u16| {
            la.wavelength_fm + div_1000((lb.wavelength_fm - la.wavelength_fm) * fb as i64)
        };
        let (x, y) = (at(range.0), at(range.1));
        let (lo, hi) = (x.min(y), x.max(y));
        measured - measured.clamp(lo, hi)
    }
}

/// Whether [`push_keep_strongest`](crate::bounded::push_keep_strongest) by SNR would leave the
/// unexplained list as it is for a peak of `snr_q8`: the list is full and no entry is fainter.
fn dropped_when_full(list: &Vec<UnexplainedPeak, MAX_UNEXPLAINED>, snr_q8: u32) -> bool {
    list.is_full() && list.iter().all(|u| snr_q8 <= u.snr_q8)
}

/// Groups the catalogue on `m`'s map into `features` (recording the lines' pixels in `m`) and each
/// feature's match windows into `windows` (kept because assignment and blend splitting both ask):
/// what matching needs from a map, per frame or, in verify mode, once in `configure`.
/// `from_stored` (calibrate mode): the line shift, which places the lines on `m`'s map from the
/// stored ones ([`LineShift::place`]), and the stored map's grouping, which then settles the
/// features when the members agree.
fn group_with_windows(
    cfg: &Config,
    catalogue: &[CatalogueLine],
    priors: &[(Nucleus, u16)],
    m: &mut MapInUse,
    features: &mut Vec<Feature, MAX_FEATURES>,
    windows: &mut Vec<(i32, i32), MAX_FEATURES>,
    from_stored: Option<(&LineShift, &Placed)>,
) -> Result<(), MatchError> {
    // Closer than 1.5 line widths, two lines may show as one peak (peak finding's own blend limit);
    // a pair that does show as two is split again after matching.
    let merge_q16 = ((cfg.line_fwhm_px_q8 as i32) << 8) * 3 / 2;
    // Calibrate mode: the lines' pixels moved from the stored ones (grouping inverts the rest).
    let from_stored = from_stored.and_then(|(shift, placed)| {
        shift
            .place(&m.map, &mut m.lines)
            .map(|nodes| (shift, placed, nodes))
    });
    // Every line's pixel is found once, while grouping, for all the steps after it.
    let hw = HalfWidth::reciprocal(&m.map);
    group_members(catalogue, &m.map, &hw, merge_q16, &mut m.lines, features);
    let settled = from_stored
        .filter(|(shift, placed, s)| shift.settle_from(&placed.features, s, features))
        .map(|(_, placed, _)| placed);
    if settled.is_none() {
        for f in features.iter_mut() {
            settle_placed(f, catalogue, &m.map, &hw, priors, &m.lines)?;
        }
    }
    windows.clear();
    let one_px = m.one_px_windows(cfg.profile.max_line_error_fm);
    // Settled from the stored grouping with 1-px line windows: the blends' reaches are the stored
    // ones scaled to this map (see `scaled_window`).
    let scale = settled
        .filter(|_| one_px)
        .and_then(|placed| slope_ratio_q24(placed.mid_slope, m).map(|r| (placed, r)));
    for (k, f) in features.iter().enumerate() {
        let fast = scale.and_then(|(placed, r)| scaled_window(placed, k, f, m, r));
        let w = match fast {
            Some(w) => w,
            None => windows_px_q16(cfg.profile.max_line_error_fm, catalogue, f, m, one_px),
        };
        let _ = windows.push(w);
    }
    Ok(())
}

/// The stored map's |slope| at its centre over `m`'s there (`mid_slope`: the stored one, fm per px
/// Q16), in Q24; `None` where either is 0 or the stored one reaches 2^39.
fn slope_ratio_q24(mid_slope: u64, m: &MapInUse) -> Option<u64> {
    let fitted = m.map.slope_at_x_by(0, &m.div).ok()?.unsigned_abs();
    (mid_slope < 1 << 39)
        .then(|| (mid_slope << 24).checked_div(fitted))
        .flatten()
        .filter(|&r| r > 0)
}

/// Calibrate mode's windows of feature `k` (settled from the stored grouping, so it has the stored
/// feature's members and position in λ) when [`MapInUse::one_px_windows`] holds and it is on the
/// sensor: the line's window 1 px, and the blend's reach its stored one ([`Placed`]) times the
/// ratio of the maps' slopes at their centres (`ratio_q24`, [`slope_ratio_q24`]). A calibration
/// moves the lines by a nearly affine shift Δ (see [`LineShift`]), which scales every pixel
/// distance by 1 + Δ′; the centres' ratio takes Δ′ as constant. On stored maps 2 % and 6 nm off
/// the fitted one (tested) the reach is within 1/256 of [`windows_px_q16`]'s; it is a tolerance
/// on a peak's distance, not a measured value. `None` otherwise (then `windows_px_q16`).
fn scaled_window(
    placed: &Placed,
    k: usize,
    f: &Feature,
    m: &MapInUse,
    ratio_q24: u64,
) -> Option<(i32, i32)> {
    let on_sensor = (f.predicted_px_q16 as i64 - m.map.center_px_q16 as i64).abs()
        <= m.map.half_width_px_q16 as i64;
    let reach = *placed.reach_px_q16.get(k)?;
    if !on_sensor || reach < 0 || ratio_q24 >= 1 << 32 {
        return None;
    }
    // reach ≤ 128 px (Q16: < 2^24) and ratio < 2^32: the product fits u64.
    let scaled = (mul_64x64(reach as u64, ratio_q24) >> 24) as i64;
    Some((1 << 16, ((1 << 16) + scaled).min(64 << 16) as i32))
}

/// How far a feature's farthest member lies from its expected position (fm); `None` for no
/// members.
fn farthest_member_fm(catalogue: &[CatalogueLine], f: &Feature) -> Option<i64> {
    f.members
        .iter()
        .filter_map(|&i| catalogue.get(i as usize))
        .map(|c| (c.wavelength_fm - f.predicted_fm).abs())
        .max()
}

/// A blend's reach (px, Q16): `far` (fm, [`farthest_member_fm`]) over the |slope| of `m`'s map at
/// pixel `p_q16`, as [`windows_px_q16`] takes it on a sensor with 1-px line windows.
fn blend_reach_px_q16(far: i64, m: &MapInUse, p_q16: i32) -> i128 {
    if far == 0 {
        return 0;
    }
    let x = m.map.x_q30_by(p_q16, &m.div);
    let slope = m.map.slope_at_x_by(x, &m.div).unwrap_or(0).unsigned_abs();
    shl32_div(far, slope.max(1) as i64)
}

/// Match windows of a feature (px, Q16): its line's (twice the allowed position error plus 3 σ
/// of the map, ≥ 1 px), and the feature's (the line's plus the reach of a blend's members,
/// whose centre moves with the unknown mix), from one evaluation of the map at its pixel.
///
/// `one_px` ([`MapInUse::one_px_windows`]): the line's window is 1 px on the whole sensor, so a
/// feature on it needs no σ (nor, when it is a single line, no slope): the same windows.
fn windows_px_q16(
    max_line_error_fm: u32,
    catalogue: &[CatalogueLine],
    f: &Feature,
    m: &MapInUse,
    one_px: bool,
) -> (i32, i32) {
    // The quotient grows with the distance: the farthest member's is the largest.
    let far = farthest_member_fm(catalogue, f);
    // On the sensor, where `one_px` bounds σ and the slope (|x| ≤ 1).
    let on_sensor = (f.predicted_px_q16 as i64 - m.map.center_px_q16 as i64).abs()
        <= m.map.half_width_px_q16 as i64;
    let (base, slope) = if one_px && on_sensor {
        if far.is_none_or(|v| v == 0) {
            // 1 px, and a reach of 0 / slope = 0.
            return (1 << 16, 1 << 16);
        }
        let x = m.map.x_q30_by(f.predicted_px_q16, &m.div);
        let slope = m.map.slope_at_x_by(x, &m.div).unwrap_or(0).unsigned_abs();
        (1 << 16, slope.max(1) as i64)
    } else {
        let (slope, sigma) = m.slope_sigma(f.predicted_px_q16);
        let slope = slope.max(1) as i64;
        let tol_fm = 2 * max_line_error_fm as i64 + 3 * sigma as i64;
        let base = (shl32_div(tol_fm, slope)).clamp(1 << 16, 64 << 16) as i32;
        (base, slope)
    };
    let reach = far.map_or(0, |v| shl32_div(v, slope));
    (base, (base as i128 + reach).clamp(1 << 16, 64 << 16) as i32)
}

/// Predicted lines for identification: isotopes of one transition merged at the prior shares
/// (a calibration cannot tell them apart anyway), species with no prior left out.
fn reference_lines(
    catalogue: &[CatalogueLine],
    priors: &[(Nucleus, u16)],
    refs: &mut Vec<ReferenceLine, MAX_REFERENCE_LINES>,
) {
    // Each entry's transition (its first catalogue line) and total weight, by position in `refs`:
    // the lines are written in place, the keys kept as catalogue indices (48 B, not 1.2 KiB).
    let mut first = [0u8; MAX_REFERENCE_LINES];
    let mut weights = [0u64; MAX_REFERENCE_LINES];
    refs.clear();
    for (i, line) in catalogue.iter().enumerate().take(MAX_CATALOGUE) {
        let share = prior_share(priors, line.nucleus) as u64;
        if share == 0 {
            continue;
        }
        let w = line.strength as u64 * share;
        let key = (line.nucleus.z(), line.lower, line.upper);
        let same_key = |k: &u8| {
            catalogue
                .get(*k as usize)
                .is_some_and(|c| (c.nucleus.z(), c.lower, c.upper) == key)
        };
        if let Some(pos) = first.iter().take(refs.len()).position(same_key) {
            if let (Some(e), Some(tw)) = (refs.get_mut(pos), weights.get_mut(pos)) {
                let total = *tw + w;
                let mixed = (e.wavelength_fm as i128 * *tw as i128
                    + line.wavelength_fm as i128 * w as i128)
                    / total.max(1) as i128;
                e.wavelength_fm = mixed as i64;
                e.strength = e.strength.saturating_add((w / 1000) as u32);
                *tw = total;
            }
            continue;
        }
        let r = ReferenceLine {
            wavelength_fm: line.wavelength_fm,
            strength: (w / 1000) as u32,
        };
        let at = refs.len();
        if refs.push(r).is_ok() {
            if let (Some(f), Some(tw)) = (first.get_mut(at), weights.get_mut(at)) {
                *f = i as u8;
                *tw = w;
            }
        }
    }
    crate::sort::sort_by_key(refs, |r| r.wavelength_fm);
}

/// ⌊√(c² + s²)⌋, in `u64` when both are below 2^31 (the same root; the 128-bit products and sum
/// otherwise).
fn root_sum_squares(c: u128, s: u128) -> u64 {
    if c < 1 << 31 && s < 1 << 31 {
        // Each square below 2^62 from one 32 × 32-bit product: the sum fits u64.
        let (c, s) = (c as u32, s as u32);
        let sum = crate::find::math::mul_u32_wide(c, c) + crate::find::math::mul_u32_wide(s, s);
        return crate::fixed::isqrt_u128(u128::from(sum)) as u64;
    }
    crate::fixed::isqrt_u128(c * c + s * s) as u64
}

/// `a / b` (truncated, b ≠ 0), in `i64` when both fit: the same quotient without the 128-bit
/// library division (a few times the 64-bit one on the Cortex-M0).
fn div_i128(a: i128, b: i128) -> i128 {
    match (i64::try_from(a), i64::try_from(b)) {
        (Ok(x), Ok(y)) => x
            .checked_div(y)
            .map_or_else(|| a.checked_div(b).unwrap_or(0), i128::from),
        _ => a.checked_div(b).unwrap_or(0),
    }
}

/// (v · 2^32) / d truncated, for d ≥ 1: in `i64` when |v| < 2^31 (the same quotient), else 128-bit.
fn shl32_div(v: i64, d: i64) -> i128 {
    if v.unsigned_abs() < 1 << 31 {
        i128::from((v << 32).checked_div(d).unwrap_or(0))
    } else {
        ((v as i128) << 32).checked_div(d as i128).unwrap_or(0)
    }
}

/// Which peaks some pair holds, from one pass over the pairs (asking the pairs for each peak is
/// ≤ 64 × 40 comparisons).
struct Taken([bool; MAX_PEAKS]);

impl Taken {
    fn of(pairs: &[Pair]) -> Taken {
        let mut t = [false; MAX_PEAKS];
        for p in pairs {
            if let Some(slot) = t.get_mut(p.peak as usize) {
                *slot = true;
            }
        }
        Taken(t)
    }

    /// Whether a pair of `pairs` (the ones this was made of) holds peak `k`; past the table, asked
    /// of the pairs.
    fn has(&self, k: usize, pairs: &[Pair]) -> bool {
        match self.0.get(k) {
            Some(&t) => t,
            None => pairs.iter().any(|p| p.peak as usize == k),
        }
    }
}

/// Bit k: feature k has another feature (at a different pixel) closer than 2.5 line widths
/// (2 · |Δp| < 5 · `fwhm_q16`, px Q16), as [`Checker::fill_lines`] marks series-limit crowding.
/// Features ordered by pixel (grouping follows the catalogue's wavelengths on a monotone map)
/// are compared with their neighbours only, out to the first past the limit; otherwise (or past
/// 64 features) every pair is compared. The same bits either way.
///
/// Work: ≤ 40 features × their neighbours within the limit (sorted), else ≤ 40 × 40 comparisons.
fn crowded_features(features: &[Feature], fwhm_q16: i64) -> u64 {
    let features = features.get(..features.len().min(64)).unwrap_or(&[]);
    let px = |f: &Feature| f.predicted_px_q16 as i64;
    let close = |a: i64, b: i64| 2 * (a - b).abs() < 5 * fwhm_q16;
    let rising = features
        .windows(2)
        .all(|w| matches!(w, [a, b] if px(a) <= px(b)));
    let falling = features
        .windows(2)
        .all(|w| matches!(w, [a, b] if px(a) >= px(b)));
    let mut out = 0u64;
    for (k, f) in features.iter().enumerate() {
        let p = px(f);
        let crowded = if rising || falling {
            // Outwards on either side; past the first one beyond the limit every other is farther.
            let after = features.iter().skip(k + 1).map(px);
            let before = features.iter().take(k).rev().map(px);
            side_crowds(after, p, close) || side_crowds(before, p, close)
        } else {
            features.iter().any(|g| px(g) != p && close(px(g), p))
        };
        if crowded {
            out |= 1 << k;
        }
    }
    out
}

/// Whether a pixel of `side` (going away from `p`, in order of distance) differs from `p` and is
/// `close` to it, looking no farther than the first that is not close.
fn side_crowds(side: impl Iterator<Item = i64>, p: i64, close: impl Fn(i64, i64) -> bool) -> bool {
    for q in side {
        if !close(q, p) {
            return false;
        }
        if q != p {
            return true;
        }
    }
    false
}

/// ⌊v / 1000⌋ truncated towards zero, as `v / 1000`: for |v| < 2^32 from one 32 × 32-bit product
/// (|v| · ⌈2^41 / 1000⌉ / 2^41 is exact below 2^41 / 448, beyond 2^32), else the division.
fn div_1000(v: i64) -> i64 {
    const M: u32 = 2_199_023_256; // ⌈2^41 / 1000⌉
    let Ok(n) = u32::try_from(v.unsigned_abs()) else {
        return v / 1000;
    };
    let q = (crate::find::math::mul_u32_wide(n, M) >> 41) as i64;
    if v < 0 {
        -q
    } else {
        q
    }
}

/// Whether `a` and `b` list the same expected rates, in order: then [`priority`] gives both the
/// same order.
fn same_rates(a: &[Feature], b: &[Feature]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(f, g)| f.expected == g.expected)
}

/// Per catalogue line, the index of the first line [`same`] as it (see [`Checker`]'s `same_as`).
fn same_classes(catalogue: &[CatalogueLine]) -> [u8; MAX_CATALOGUE] {
    let mut out = [u8::MAX; MAX_CATALOGUE];
    for (i, (slot, line)) in out.iter_mut().zip(catalogue).enumerate() {
        let first = catalogue.iter().take(i).position(|c| same(c, line));
        *slot = first.unwrap_or(i) as u8;
    }
    out
}

/// Per line of nucleus `a`, the first line of nucleus `b` with its transition (`u8::MAX`: none).
fn partners(catalogue: &[CatalogueLine], a: Nucleus, b: Nucleus) -> [u8; MAX_CATALOGUE] {
    let mut out = [u8::MAX; MAX_CATALOGUE];
    for (slot, la) in out
        .iter_mut()
        .zip(catalogue)
        .filter(|(_, l)| l.nucleus == a)
    {
        let found = catalogue
            .iter()
            .position(|l| l.nucleus == b && l.lower == la.lower && l.upper == la.upper);
        if let Some(ib) = found {
            *slot = ib as u8;
        }
    }
    out
}

/// Per `same_as` class, the position in `pairs` of the first pair whose feature has a member of
/// that class (`u8::MAX`: none): the pair `pairs.iter().find` would give for a line of the class.
fn first_pairs(
    pairs: &[Pair],
    features: &[Feature],
    same_as: &[u8; MAX_CATALOGUE],
) -> [u8; MAX_CATALOGUE] {
    let mut out = [u8::MAX; MAX_CATALOGUE];
    for (k, p) in pairs.iter().enumerate() {
        let Some(f) = features.get(p.feature as usize) else {
            continue;
        };
        for &m in f.members.iter() {
            let class = same_as.get(m as usize).copied().unwrap_or(u8::MAX);
            if let Some(slot) = out.get_mut(class as usize) {
                if *slot == u8::MAX {
                    *slot = k as u8;
                }
            }
        }
    }
    out
}

fn same(a: &CatalogueLine, b: &CatalogueLine) -> bool {
    a.nucleus == b.nucleus && a.lower == b.lower && a.upper == b.upper
}

/// The sensor's wavelength range on the stored map, widened for what calibration may find:
/// 10 nm and 3 % (calibrate), a quarter of the span (blind).
fn sensor_range(cfg: &Config) -> Result<(i64, i64), CheckError> {
    let last = ((cfg.pixels as i32) - 1) << 16;
    let e = |p| {
        cfg.stored
            .map
            .wavelength_fm(p)
            .map_err(|e| CheckError::Match(e.into()))
    };
    let (a, b) = (e(0)?, e(last)?);
    let (lo, hi) = (a.min(b), a.max(b));
    let span = hi - lo;
    let margin = match cfg.mode {
        Mode::Verify => span / 100,
        Mode::Calibrate => 10_000_000 + span * 3 / 100,
        Mode::CalibrateBlind => span / 4,
    };
    Ok((lo - margin, hi + margin))
}

/// Pixel of drift point `i` (0 … 16) of a sensor whose last pixel (Q16) is `last`.
fn drift_pixel(last: i64, i: i64) -> i32 {
    // last < 2^32 (pixels ≤ 65 535): last · i / 16 by a shift, the same floor for p ≥ 0.
    ((last * i) >> 4) as i32
}

/// The stored map's side of [`drift_fm`], once per configuration: each drift point's x and the
/// stored wavelength there. x depends only on the pixel and the map's frame (centre, half-width),
/// so for a fitted map on the stored map's frame (every fit: both are the sensor's standard frame)
/// the drift needs only the fitted map's evaluation at each x, 17 divisions and 17 Horner
/// evaluations fewer per check, the same integers.
struct DriftPoints {
    /// (frame centre, half-width) and per point (x Q30, stored λ fm), when every point evaluates.
    points: Option<((i32, i32), PointTable)>,
}

/// Per drift point (x Q30, stored λ fm).
type PointTable = [(i64, i64); 17];

impl DriftPoints {
    const NONE: DriftPoints = DriftPoints { points: None };

    /// The points of `stored` for a sensor of `pixels` pixels, written in place (no copy of the
    /// table on `configure`'s stack); none where one does not evaluate.
    fn fill(&mut self, stored: &WavelengthMap, pixels: u16) {
        let last = ((pixels as i64) - 1) << 16;
        let hw = HalfWidth::forward(stored);
        let frame = (stored.center_px_q16, stored.half_width_px_q16);
        let (_, out) = self.points.insert((frame, [(0i64, 0i64); 17]));
        for (i, slot) in (0..=16i64).zip(out.iter_mut()) {
            let x = stored.x_q30_by(drift_pixel(last, i), &hw);
            let Ok(lam) = stored.wavelength_at_x(x) else {
                self.points = None;
                return;
            };
            *slot = (x, lam);
        }
    }

    #[cfg(test)]
    fn new(stored: &WavelengthMap, pixels: u16) -> DriftPoints {
        let mut d = DriftPoints::NONE;
        d.fill(stored, pixels);
        d
    }

    /// [`drift_fm`]`(fitted, stored, pixels)`, from the points where they were made for `stored`'s
    /// frame and `fitted` shares it.
    fn drift_fm(&self, fitted: &WavelengthMap, stored: &WavelengthMap, pixels: u16) -> Option<i64> {
        let frame = (fitted.center_px_q16, fitted.half_width_px_q16);
        let Some((made, points)) = &self.points else {
            return drift_fm(fitted, stored, pixels);
        };
        if *made != frame || (stored.center_px_q16, stored.half_width_px_q16) != frame {
            return drift_fm(fitted, stored, pixels);
        }
        let mut worst: Option<i64> = None;
        for &(x, lam_stored) in points.iter() {
            let d = fitted.wavelength_at_x(x).ok()? - lam_stored;
            if worst.is_none_or(|w| d.abs() > w.abs()) {
                worst = Some(d);
            }
        }
        worst
    }
}

/// Largest (fitted − stored) difference at 17 points across the sensor, femtometres, with sign.
///
/// Maps on one frame (centre and half-width; a fit and a stored map of the same sensor) share each
/// point's x: one division through the half-width's reciprocal per point for both, the same
/// integers as evaluating each map on its own.
fn drift_fm(fitted: &WavelengthMap, stored: &WavelengthMap, pixels: u16) -> Option<i64> {
    let last = ((pixels as i64) - 1) << 16;
    let mut worst: Option<i64> = None;
    let same_frame = fitted.center_px_q16 == stored.center_px_q16
        && fitted.half_width_px_q16 == stored.half_width_px_q16;
    let hw = HalfWidth::forward(fitted);
    for i in 0..=16i64 {
        let p = drift_pixel(last, i);
        let d = if same_frame {
            let x = fitted.x_q30_by(p, &hw);
            fitted.wavelength_at_x(x).ok()? - stored.wavelength_at_x(x).ok()?
        } else {
            fitted.wavelength_fm(p).ok()? - stored.wavelength_fm(p).ok()?
        };
        if worst.is_none_or(|w| d.abs() > w.abs()) {
            worst = Some(d);
        }
    }
    worst
}

const _: () = assert!(MAX_FEATURES <= 64);
const _: () = assert!(MAX_CATALOGUE <= 64);

/// Lowest and highest whole pixel of Q16 pixels, widened by one px each way and clamped to i16
/// (sensors are ≤ 4096 px); `None` for no pixels. See [`beyond_span`].
fn span_px(px: impl Iterator<Item = i32>) -> Option<(i16, i16)> {
    let (lo, hi) = px.fold(None, |acc: Option<(i32, i32)>, p| match acc {
        None => Some((p, p)),
        Some((lo, hi)) => Some((lo.min(p), hi.max(p))),
    })?;
    let whole = |v: i32| ((v >> 16) as i16).clamp(i16::MIN + 1, i16::MAX - 1);
    Some((whole(lo) - 1, whole(hi) + 1))
}

/// Whether a peak at `c_q16` (px, Q16) is more than 64 px from every pixel that [`span_px`] made
/// `span` of (an empty span, lo > hi, holds none): then no member is within a 64-px window of it.
fn beyond_span(c_q16: i32, (lo, hi): (i16, i16)) -> bool {
    let c = c_q16 >> 16;
    lo > hi || c < i32::from(lo) - 64 || c > i32::from(hi) + 64
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A catalogue with repeats of (nucleus, transition), from a seed.
    fn catalogue(next: &mut impl FnMut() -> u64) -> std::vec::Vec<CatalogueLine> {
        let nuclei = [Nucleus::H1, Nucleus::H2, Nucleus::He4];
        (0..(next() % (MAX_CATALOGUE as u64 + 1)))
            .map(|_| CatalogueLine {
                nucleus: nuclei[(next() % 3) as usize],
                lower: 2 + (next() % 2) as u8,
                upper: 3 + (next() % 5) as u8,
                wavelength_fm: (next() % 1_000_000) as i64,
                strength: 1,
            })
            .collect()
    }

    /// The neighbour scan marks the features the all-pairs test of crowding marks: sorted either
    /// way, unsorted, equal pixels, and limits from none to all.
    #[test]
    fn crowded_features_are_the_all_pairs_test() {
        let mut next = crate::test_rng::xorshift(0x5851_f42d_4c95_7f2du64);
        let (mut marked, mut clear) = (0, 0);
        for round in 0..4000 {
            let n = (next() % (MAX_FEATURES as u64 + 1)) as usize;
            let spread = 1 + (next() % 400) as i32;
            let mut px: std::vec::Vec<i32> = (0..n)
                .map(|_| ((next() % spread as u64) as i32) << 14)
                .collect();
            match round % 3 {
                0 => px.sort(),
                1 => px.sort_by(|a, b| b.cmp(a)),
                _ => {}
            }
            let features: std::vec::Vec<Feature> = px
                .iter()
                .map(|&p| Feature {
                    members: Vec::new(),
                    primary: 0,
                    predicted_fm: 0,
                    predicted_px_q16: p,
                    expected: 0,
                })
                .collect();
            let fwhm_q16 = (next() % (8 << 16)) as i64;
            let got = crowded_features(&features, fwhm_q16);
            for (k, f) in features.iter().enumerate() {
                let want = features.iter().any(|g| {
                    g.predicted_px_q16 != f.predicted_px_q16
                        && 2 * (g.predicted_px_q16 as i64 - f.predicted_px_q16 as i64).abs()
                            < 5 * fwhm_q16
                });
                assert_eq!(got >> k & 1 == 1, want, "round {round} feature {k}");
                if want {
                    marked += 1;
                } else {
                    clear += 1;
                }
            }
        }
        assert!(marked > 5000 && clear > 5000, "{marked} {clear}");
    }

    /// The product-and-shift quotient by 1000 is the division, across the 32-bit range, at its
    /// ends and past it.
    #[test]
    fn div_1000_is_the_division() {
        let mut next = crate::test_rng::xorshift(0x2545_f491_4f6c_dd1du64);
        let edges = [
            0i64,
            1,
            999,
            1000,
            1001,
            u32::MAX as i64,
            1 << 32,
            i64::MAX,
            i64::MIN + 1,
        ];
        for v in edges.into_iter().chain((0..200_000).map(|_| {
            let v = (next() >> (next() % 64)) as i64;
            if next().is_multiple_of(2) {
                v
            } else {
                v.wrapping_neg()
            }
        })) {
            for v in [v, v.wrapping_neg()] {
                assert_eq!(div_1000(v), v / 1000, "{v}");
            }
        }
    }

    /// Calibrate mode's scaled blend windows are [`windows_px_q16`]'s to 1/256 of the reach (and the
    /// same line windows) on fitted maps up to 2 % and 6 nm and a tenth of the curvature off the
    /// stored one, hydrogen and deuterium; and the scaled path is the one taken.
    #[test]
    fn scaled_windows_are_the_fitted_maps_windows() {
        use crate::judge::profile;
        const N: u16 = 2048;
        let stored = WavelengthMap::new(N, 2, [545_000_000, 175_000_000, -1_200_000, 0]).unwrap();
        let (mut worst, mut blends) = (0, 0);
        for prof in [profile::HYDROGEN, profile::DEUTERIUM] {
            let cfg = Config {
                pixels: N,
                condition: crate::condition::ConditionConfig::new(4095, 10_000),
                find: crate::find::FindConfig::DEFAULT,
                stored: super::super::config::StoredMap {
                    map: stored,
                    sigma_fm: 3_000,
                },
                mode: Mode::Calibrate,
                degree: 2,
                air: crate::predict::Air::Standard,
                line_fwhm_px_q8: 3 << 8,
                profile: prof,
            };
            let checker = Checker::new(cfg.clone()).unwrap();
            for scale_ppm in [-20_000i64, -7_000, 0, 3_000, 20_000] {
                for offset_fm in [-6_000_000i64, -1_000_000, 0, 2_500_000, 6_000_000] {
                    for c2_ppm in [-100_000i64, 0, 100_000] {
                        let [c0, c1, c2, _] = stored.coeff_fm;
                        let coeff = [
                            c0 + offset_fm,
                            c1 + c1 * scale_ppm / 1_000_000,
                            c2 + c2 * c2_ppm / 1_000_000,
                            0,
                        ];
                        let fitted = WavelengthMap::new(N, 2, coeff).unwrap();
                        let mut m = MapInUse::EMPTY;
                        m.set(fitted, None, 3_000);
                        let (mut features, mut windows) = (Vec::new(), Vec::new());
                        group_with_windows(
                            &cfg,
                            &checker.catalogue,
                            &checker.priors,
                            &mut m,
                            &mut features,
                            &mut windows,
                            Some((&checker.line_shift, &checker.placed)),
                        )
                        .unwrap();
                        let one_px = m.one_px_windows(cfg.profile.max_line_error_fm);
                        assert!(one_px);
                        let ratio = slope_ratio_q24(checker.placed.mid_slope, &m).unwrap();
                        for (k, (f, &(base, total))) in
                            features.iter().zip(windows.iter()).enumerate()
                        {
                            // Grouping took the scaled windows where there are some (off the
                            // sensor, the computed ones: compared below, exactly).
                            let fast = scaled_window(&checker.placed, k, f, &m, ratio);
                            assert!(fast.is_none_or(|w| w == (base, total)));
                            let (b, t) = windows_px_q16(
                                cfg.profile.max_line_error_fm,
                                &checker.catalogue,
                                f,
                                &m,
                                one_px,
                            );
                            assert_eq!(base, b);
                            let reach = (t - b) as i64;
                            let tol = reach / 256 + 1;
                            assert!(((total - t) as i64).abs() <= tol, "{total} vs {t}");
                            if fast.is_none() {
                                assert_eq!(total, t);
                            } else if reach > 0 {
                                blends += 1;
                                worst = worst.max((total - t).abs());
                            }
                        }
                    }
                }
            }
        }
        assert!(blends > 500, "{blends}");
        std::println!("scaled blend windows: {blends}, worst {worst} / 65536 px");
    }

    /// The 32-bit squares give the 128-bit root, below 2^31 and across the switch.
    #[test]
    fn root_sum_squares_is_the_wide_root() {
        let mut next = crate::test_rng::xorshift(0x94d0_49bb_1331_11ebu64);
        let wide = |c: u128, s: u128| crate::fixed::isqrt_u128(c * c + s * s) as u64;
        for _ in 0..100_000 {
            let c = (next() >> (next() % 64)) as u128 >> 32;
            let s = (next() >> (next() % 64)) as u128 >> 32;
            assert_eq!(root_sum_squares(c, s), wide(c, s), "{c} {s}");
        }
        for (c, s) in [
            (0, 0),
            ((1 << 31) - 1, (1 << 31) - 1),
            (1 << 31, 5),
            (7, 1 << 31),
        ] {
            assert_eq!(root_sum_squares(c, s), wide(c, s), "{c} {s}");
        }
    }

    /// The table says which peaks the pairs hold, as asking the pairs does, past it too.
    #[test]
    fn taken_peaks_are_the_pairs_peaks() {
        let mut next = crate::test_rng::xorshift(0xbf58_476d_1ce4_e5b9u64);
        for _ in 0..2000 {
            let pairs: std::vec::Vec<Pair> = (0..next() % 41)
                .map(|_| Pair {
                    feature: (next() % 40) as u8,
                    peak: (next() % 80) as u8,
                })
                .collect();
            let t = Taken::of(&pairs);
            for k in 0..90 {
                assert_eq!(t.has(k, &pairs), pairs.iter().any(|p| p.peak as usize == k));
            }
        }
    }

    /// A peak the list would drop is exactly one whose push leaves the list unchanged.
    #[test]
    fn skipped_unexplained_peaks_are_the_dropped_ones() {
        let mut next = crate::test_rng::xorshift(0x7f4a_7c15_9e37_79b9u64);
        let (mut skipped, mut kept) = (0, 0);
        for round in 0..20_000 {
            let mut list: Vec<UnexplainedPeak, MAX_UNEXPLAINED> = Vec::new();
            let n = if round % 2 == 0 {
                MAX_UNEXPLAINED as u64
            } else {
                next() % (MAX_UNEXPLAINED as u64 + 1)
            };
            for _ in 0..n {
                let _ = list.push(UnexplainedPeak {
                    wavelength_fm: (next() % 1000) as i64,
                    center_px_q16: 0,
                    snr_q8: (next() % 50) as u32,
                    hint: None,
                });
            }
            let item = UnexplainedPeak {
                wavelength_fm: -1,
                center_px_q16: 1,
                snr_q8: (next() % 50) as u32,
                hint: None,
            };
            let before = list.clone();
            let skip = dropped_when_full(&list, item.snr_q8);
            crate::bounded::push_keep_strongest(&mut list, item, |u| u.snr_q8);
            assert_eq!(skip, list == before);
            if skip {
                skipped += 1;
            } else {
                kept += 1;
            }
        }
        assert!(skipped > 500 && kept > 500, "{skipped} {kept}");
    }

    /// A peak `beyond_span` of some pixels is more than 64 px from each of them, so the member
    /// search it skips would have found none within its ≤ 64-px window; near the span it is
    /// never skipped.
    #[test]
    fn peaks_beyond_a_member_span_are_beyond_every_member() {
        let mut next = crate::test_rng::xorshift(0x5b1e_03d7_c2a9_6f41u64);
        let (mut skipped, mut near) = (0, 0);
        assert!(span_px(core::iter::empty()).is_none());
        assert!(beyond_span(0, (1, 0)));
        for round in 0..200_000 {
            // Sensor pixels, and now and then the whole Q16 range.
            let draw = |next: &mut dyn FnMut() -> u64| -> i32 {
                if round % 50 == 0 {
                    next() as i32
                } else {
                    (next() % (4200 << 16)) as i32 - (50 << 16)
                }
            };
            let members: std::vec::Vec<i32> =
                (0..1 + next() % 4).map(|_| draw(&mut next)).collect();
            let c = if round % 2 == 0 {
                members[0].saturating_add((next() % (140 << 16)) as i32 - (70 << 16))
            } else {
                draw(&mut next)
            };
            let span = span_px(members.iter().copied()).unwrap();
            let nearest = members
                .iter()
                .map(|&p| (i64::from(p) - i64::from(c)).abs())
                .min();
            let within = nearest.unwrap() <= 64 << 16;
            if beyond_span(c, span) {
                assert!(!within, "{c} {members:?} {span:?}");
                skipped += 1;
            } else if within {
                near += 1;
            }
        }
        assert!(skipped > 10_000 && near > 10_000, "{skipped} {near}");
    }

    #[test]
    fn precomputed_classes_partners_and_first_pairs_are_the_searches() {
        let mut next = crate::test_rng::xorshift(0x1503_70fe_a7c0_9d11u64);
        for _ in 0..3_000 {
            let cat = catalogue(&mut next);
            let same_as = same_classes(&cat);
            for (i, li) in cat.iter().enumerate() {
                for (j, lj) in cat.iter().enumerate() {
                    assert_eq!(same_as[i] == same_as[j], same(li, lj), "{i} {j}");
                }
            }
            assert!(same_as.iter().skip(cat.len()).all(|&c| c == u8::MAX));
            let (a, b) = (Nucleus::H1, Nucleus::H2);
            let partner = partners(&cat, a, b);
            for (ia, la) in cat.iter().enumerate() {
                let want = (la.nucleus == a)
                    .then(|| {
                        cat.iter().enumerate().find(|(_, l)| {
                            l.nucleus == b && l.lower == la.lower && l.upper == la.upper
                        })
                    })
                    .flatten()
                    .map_or(u8::MAX, |(ib, _)| ib as u8);
                assert_eq!(partner[ia], want);
            }
            // Features with members anywhere (some past the catalogue), pairs in any order.
            let mut features: Vec<Feature, MAX_FEATURES> = Vec::new();
            for _ in 0..(next() % 12) {
                let mut members = Vec::new();
                for _ in 0..(1 + next() % 4) {
                    let _ = members.push((next() % (cat.len() as u64 + 3)) as u8);
                }
                let _ = features.push(Feature {
                    members,
                    primary: 0,
                    predicted_fm: 0,
                    predicted_px_q16: 0,
                    expected: 0,
                });
            }
            let pairs: std::vec::Vec<Pair> = (0..(next() % 40))
                .map(|_| Pair {
                    feature: (next() % (features.len() as u64 + 2)) as u8,
                    peak: 0,
                })
                .collect();
            let first = first_pairs(&pairs, &features, &same_as);
            for (ia, la) in cat.iter().enumerate() {
                for (ib, lb) in cat.iter().enumerate() {
                    let want = pairs.iter().position(|p| {
                        features.get(p.feature as usize).is_some_and(|f| {
                            f.members.iter().any(|&i| {
                                cat.get(i as usize)
                                    .is_some_and(|c| same(c, la) || same(c, lb))
                            })
                        })
                    });
                    let got = first[same_as[ia] as usize].min(first[same_as[ib] as usize]);
                    assert_eq!(want.map_or(u8::MAX, |k| k as u8), got, "{ia} {ib}");
                }
            }
        }
    }

    #[test]
    fn drift_from_stored_points_is_the_drift_of_both_maps() {
        let mut next = crate::test_rng::xorshift(0x2d1f_7e3a_44c0_b905u64);
        let mut compared = 0;
        for round in 0..3_000 {
            let pixels = [16u16, 2048, 4096, 65_535][round % 4];
            let spread = |next: &mut dyn FnMut() -> u64, top: u64| {
                (next() % (2 * top + 1)) as i64 - top as i64
            };
            let coeff = |n: &mut dyn FnMut() -> u64| {
                [
                    400_000_000 + spread(n, 50_000_000),
                    100_000_000 + spread(n, 90_000_000),
                    spread(n, 8_000_000),
                    spread(n, 1_000_000),
                ]
            };
            let degree = 1 + (next() % 3) as u8;
            let Ok(stored) = WavelengthMap::new(pixels, degree, coeff(&mut next)) else {
                continue;
            };
            let fitted = if round % 5 == 0 {
                // Another frame: the general path.
                let half = stored.half_width_px_q16 + 1 + (next() % 1000) as i32;
                WavelengthMap::with_frame(half, half, 2, coeff(&mut next), pixels)
            } else {
                WavelengthMap::new(pixels, 1 + (next() % 3) as u8, coeff(&mut next))
            };
            let Ok(fitted) = fitted else {
                continue;
            };
            let points = DriftPoints::new(&stored, pixels);
            assert_eq!(
                points.drift_fm(&fitted, &stored, pixels),
                drift_fm(&fitted, &stored, pixels)
            );
            compared += 1;
        }
        assert!(compared > 1_000, "{compared}");
        let m = WavelengthMap::new(2048, 2, [500_000_000, 150_000_000, -5_000_000, 0]).unwrap();
        assert!(DriftPoints::new(&m, 2048).points.is_some());
    }

    #[test]
    fn one_px_windows_are_the_worked_out_windows() {
        use crate::calibrate::{fit_map, FitPoint};
        let mut next = crate::test_rng::xorshift(0x5be0_cd19_137e_2179u64);
        let (mut compared, mut bounded) = (0, 0);
        for round in 0..400 {
            let pixels = [2048u16, 4096, 1024][round % 3];
            let spread =
                |n: &mut dyn FnMut() -> u64, top: i64| (n() % (2 * top as u64 + 1)) as i64 - top;
            let c1 = 150_000_000 + spread(&mut next, 60_000_000);
            let truth =
                WavelengthMap::new(pixels, 2, [500_000_000, c1, spread(&mut next, c1 / 20), 0])
                    .unwrap();
            // A fit to 6–20 points with centroid σ from 1/512 to 1/4 px, or the stored map alone.
            let n = 6 + (next() % 15) as usize;
            let pts: std::vec::Vec<FitPoint> = (0..n)
                .map(|_| {
                    let p = ((next() % pixels as u64) << 16) as i32;
                    FitPoint {
                        center_px_q16: p,
                        sigma_px_q16: 128 << (next() % 7),
                        wavelength_fm: truth.wavelength_fm(p).unwrap() + spread(&mut next, 3_000),
                    }
                })
                .collect();
            let Ok(fit) = fit_map(&pts, 1 + (round % 2) as u8, pixels) else {
                continue;
            };
            let mut m = MapInUse::EMPTY;
            if round % 5 == 0 {
                m.set(truth, None, 1_000 + (next() % 20_000) as u32);
            } else {
                m.set(fit.map, Some(&fit), 3_000);
            }
            let max_err = [5_000u32, 50_000, 200_000][(next() % 3) as usize];
            let one_px = m.one_px_windows(max_err);
            bounded += usize::from(one_px);
            for _ in 0..30 {
                // Features on and off the sensor, single lines and blends.
                let p = (next() % ((pixels as u64 + 200) << 16)) as i64 - (100 << 16);
                let lam = m.map.wavelength_fm(p as i32).unwrap_or(500_000_000);
                let cat = [line(lam), line(lam + spread(&mut next, 300_000))];
                let mut members = Vec::new();
                members.push(0).unwrap();
                if next().is_multiple_of(2) {
                    members.push(1).unwrap();
                }
                let f = Feature {
                    members,
                    primary: 0,
                    predicted_fm: lam,
                    predicted_px_q16: p as i32,
                    expected: 0,
                };
                let plain = windows_px_q16(max_err, &cat, &f, &m, false);
                assert_eq!(windows_px_q16(max_err, &cat, &f, &m, one_px), plain);
                compared += 1;
            }
            // The bounds hold on the sensor.
            if let (Some(s), Some(slope)) = (
                m.sigma_poly.as_ref().map(|s| s.sigma_max_fm()),
                m.map.min_abs_slope_on_sensor(&m.div),
            ) {
                for k in -64..=64i64 {
                    let x = k << 24;
                    if let (Some(bound), Some(v)) =
                        (s, m.sigma_poly.as_ref().and_then(|p| p.sigma_fm_at_x(x)))
                    {
                        assert!(v <= bound, "{v} {bound}");
                    }
                    let at = m.map.slope_at_x_by(x, &m.div).unwrap().unsigned_abs();
                    assert!(at >= slope, "{at} {slope}");
                }
            }
        }
        assert!(compared > 5_000 && bounded > 50, "{compared} {bounded}");
    }

    fn line(wavelength_fm: i64) -> CatalogueLine {
        CatalogueLine::test_h1(wavelength_fm, 1)
    }

    #[test]
    fn narrow_division_is_the_wide_one() {
        let mut next = crate::test_rng::xorshift(0x0bb6_7ae8_584c_aa73u64);
        for _ in 0..100_000 {
            let v = next();
            let a =
                ((v as i64) >> (v % 64)) as i128 * if v.is_multiple_of(7) { 1 << 40 } else { 1 };
            let w = next();
            let b = ((w as i64) >> (w % 64)) as i128;
            let b = if b == 0 { 1 } else { b };
            assert_eq!(div_i128(a, b), a / b, "{a} {b}");
        }
        assert_eq!(div_i128(i64::MIN as i128, -1), -(i64::MIN as i128));
    }
}

//! The canonical double-gamma haemodynamic response and design matrices for imaging analyses.
//!
//! The response to a brief neural event is modelled as the difference of two gamma densities
//! (Friston et al. 1998, NeuroImage 7:30–40; Glover 1999, NeuroImage 9:416–429): a peak and a
//! later, smaller undershoot,
//!
//! h(t) = t^(a1−1) b1^a1 e^(−b1 t) / Γ(a1) − c · t^(a2−1) b2^a2 e^(−b2 t) / Γ(a2),  t > 0,
//!
//! with the parameter values of common practice ([`DoubleGamma::CANONICAL`]; Glover's own
//! fitted values differ, from memory): peak shape a1 = 6,
//! undershoot shape a2 = 16, rates b1 = b2 = 1 s⁻¹ (scale 1 s), undershoot ratio c = 1/6,
//! truncated at 32 s. Each gamma density is computed in log space (ln Γ from `statrs`).
//!
//! A regressor is built on a microtime grid of δ = TR / B seconds (B bins per scan, 16 by
//! default, as commonly used), convolved with the kernel sampled on that grid and normalised to
//! unit area, and sampled at the start of each scan (t_n = n·TR, n = 0 … N − 1): the time origin
//! of BIDS onsets is the start of the first volume's acquisition, so the reference is the first
//! acquired slice (match it with slice-timing correction to the first slice, or shift onsets).
//!
//! [`design_file`] turns an events file of `valuedrift export` into one design matrix per run.

use super::{EventsFile, Scale};
use statrs::function::gamma::ln_gamma;
use std::io::Write;

/// Parameters of the double-gamma response h(t) = g(t; a1, b1) − c · g(t; a2, b2), where
/// g(t; a, b) = t^(a−1) b^a e^(−b t) / Γ(a) is the gamma density of shape a and rate b
/// (Friston et al. 1998; Glover 1999).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DoubleGamma {
    /// Shape a1 of the peak gamma density.
    pub peak_shape: f64,
    /// Rate b1 of the peak gamma density (1/s; the scale is 1/b1 seconds).
    pub peak_rate: f64,
    /// Shape a2 of the undershoot gamma density.
    pub undershoot_shape: f64,
    /// Rate b2 of the undershoot gamma density (1/s).
    pub undershoot_rate: f64,
    /// Ratio c of the undershoot to the peak.
    pub ratio: f64,
    /// Kernel length (s): the sampled kernel covers [0, length].
    pub length: f64,
}

impl Default for DoubleGamma {
    fn default() -> Self {
        Self::CANONICAL
    }
}

/// ln g(t; a, b) = (a − 1) ln t + a ln b − b t − ln Γ(a), the log of the gamma density of
/// shape a and rate b at t > 0 (log space so that large shapes and times do not overflow).
fn ln_gamma_density(t: f64, shape: f64, rate: f64) -> f64 {
    (shape - 1.0) * t.ln() + shape * rate.ln() - rate * t - ln_gamma(shape)
}

impl DoubleGamma {
    /// The parameter values of common practice (the form: Friston et al. 1998; Glover 1999):
    /// a1 = 6, a2 = 16,
    /// b1 = b2 = 1 s⁻¹, c = 1/6, kernel length 32 s.
    pub const CANONICAL: DoubleGamma = DoubleGamma {
        peak_shape: 6.0,
        peak_rate: 1.0,
        undershoot_shape: 16.0,
        undershoot_rate: 1.0,
        ratio: 1.0 / 6.0,
        length: 32.0,
    };

    /// The response at time t (s), unnormalised:
    /// h(t) = exp(ln g(t; a1, b1)) − c · exp(ln g(t; a2, b2)) for t > 0, and 0 for t ≤ 0
    /// (Friston et al. 1998; Glover 1999). The formula itself, not truncated at `length`.
    pub fn value(&self, t: f64) -> f64 {
        if t <= 0.0 || !t.is_finite() {
            return 0.0;
        }
        ln_gamma_density(t, self.peak_shape, self.peak_rate).exp()
            - self.ratio * ln_gamma_density(t, self.undershoot_shape, self.undershoot_rate).exp()
    }

    /// [`DoubleGamma::value`] at each of `times` (s).
    pub fn values(&self, times: &[f64]) -> Vec<f64> {
        times.iter().map(|&t| self.value(t)).collect()
    }

    /// dh/dt = g(t; a1, b1)·((a1 − 1)/t − b1) − c·g(t; a2, b2)·((a2 − 1)/t − b2) for t > 0
    /// (differentiating the gamma densities of Friston et al. 1998).
    fn derivative(&self, t: f64) -> f64 {
        let g1 = ln_gamma_density(t, self.peak_shape, self.peak_rate).exp();
        let g2 = ln_gamma_density(t, self.undershoot_shape, self.undershoot_rate).exp();
        g1 * ((self.peak_shape - 1.0) / t - self.peak_rate)
            - self.ratio * g2 * ((self.undershoot_shape - 1.0) / t - self.undershoot_rate)
    }

    /// Time of the peak of h: the root of dh/dt (see [`DoubleGamma::value`]) between t = 0 and
    /// the mode of the peak density, (a1 − 1)/b1, found by bisection to machine precision.
    /// About 4.9985 s for [`DoubleGamma::CANONICAL`]. Requires a1 > 1 and an undershoot that
    /// peaks after the peak density, as for every response of this shape in use.
    pub fn peak_time(&self) -> f64 {
        // h' > 0 just after 0 (the peak density dominates) and h' ≤ 0 at the peak density's
        // mode, where its own slope is zero and the undershoot still rises.
        let (mut low, mut high) = (0.0, (self.peak_shape - 1.0) / self.peak_rate);
        for _ in 0..200 {
            let mid = 0.5 * (low + high);
            if mid <= low || mid >= high {
                break;
            }
            if self.derivative(mid) > 0.0 {
                low = mid;
            } else {
                high = mid;
            }
        }
        0.5 * (low + high)
    }

    /// The kernel on a microtime grid of step δ = `dt` seconds, normalised to unit area on the
    /// grid: k_j = h(j δ) / (δ Σ_i h(i δ)), j = 0 … ⌊length/δ⌋, so that δ Σ_j k_j = 1 and a
    /// sustained unit input gives a response of 1 (Friston et al. 1998 for h; normalisation as
    /// commonly used).
    ///
    /// # Panics
    /// When `dt` is not a finite positive number or the kernel has no positive area on the grid
    /// (the command line validates the TR and bins before calling this).
    pub fn sampled(&self, dt: f64) -> Vec<f64> {
        assert!(
            dt.is_finite() && dt > 0.0,
            "microtime step {dt} must be > 0"
        );
        let last = (self.length / dt + 1e-9).floor() as usize;
        let raw: Vec<f64> = (0..=last).map(|j| self.value(j as f64 * dt)).collect();
        let area = dt * raw.iter().sum::<f64>();
        assert!(
            area.is_finite() && area > 0.0,
            "kernel area {area} on the grid"
        );
        raw.into_iter().map(|h| h / area).collect()
    }
}

/// Scan timing of a run: repetition time, number of scans and microtime resolution.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Timing {
    /// Repetition time TR (s).
    pub tr: f64,
    /// Number of scans (volumes) N.
    pub scans: usize,
    /// Microtime bins per scan B (δ = TR / B).
    pub bins: usize,
}

impl Timing {
    /// The default microtime resolution: 16 bins per scan, as commonly used.
    pub const DEFAULT_BINS: usize = 16;

    /// Microtime step δ = TR / B (s).
    pub fn dt(&self) -> f64 {
        self.tr / self.bins as f64
    }

    /// End of the last scan, N·TR (s).
    pub fn end(&self) -> f64 {
        self.tr * self.scans as f64
    }
}

/// One event of a regressor: onset and duration in seconds from the start of the first scan,
/// and amplitude.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Event {
    /// Onset (s).
    pub onset: f64,
    /// Duration (s); 0 for a brief event (an impulse).
    pub duration: f64,
    /// Amplitude (height of the boxcar, or area of the impulse).
    pub amplitude: f64,
}

/// The input on the microtime grid, bin m covering [m δ, (m + 1) δ), m = 0 … N·B − 1:
/// x_m = Σ_i a_i · |[o_i, o_i + d_i) ∩ [m δ, (m + 1) δ)| / δ for events with duration d_i > 0
/// (a boxcar of height a_i), and x_m += a_i / δ in the bin holding o_i for d_i = 0 (an impulse
/// of area a_i). Parts outside [0, N·TR) are left out. Construction as commonly used.
pub fn microtime_input(events: &[Event], timing: Timing) -> Vec<f64> {
    let dt = timing.dt();
    let n = timing.scans * timing.bins;
    let mut x = vec![0.0; n];
    // Bin holding time t (1e-9 bins of tolerance against rounding of t/δ).
    let bin = |t: f64| (t / dt + 1e-9).floor();
    for e in events {
        if !(e.onset.is_finite() && e.duration.is_finite() && e.amplitude.is_finite()) {
            continue;
        }
        if e.duration <= 0.0 {
            let m = bin(e.onset);
            if m >= 0.0 && (m as usize) < n {
                x[m as usize] += e.amplitude / dt;
            }
            continue;
        }
        let end = e.onset + e.duration;
        let first = bin(e.onset).max(0.0) as usize;
        let last = (((end / dt) - 1e-9).ceil().max(0.0) as usize).min(n);
        for (m, xm) in x.iter_mut().enumerate().take(last).skip(first) {
            let overlap = end.min((m + 1) as f64 * dt) - e.onset.max(m as f64 * dt);
            if overlap > 0.0 {
                *xm += e.amplitude * overlap / dt;
            }
        }
    }
    x
}

/// The convolved regressor sampled at the start of each scan, t_n = n·TR:
/// y_n = δ Σ_{j=0}^{J} k_j x_{nB − j} (x from [`microtime_input`], k from
/// [`DoubleGamma::sampled`], J = ⌊length/δ⌋, x_m = 0 for m < 0), the discrete form of
/// y(t) = ∫ h(t − s) x(s) ds (Friston et al. 1998 for the convolution model of the response;
/// microtime sampling as commonly used). A unit impulse at a grid time o gives
/// y_n = k_{(n·TR − o)/δ}, the sampled kernel; a boxcar gives the kernel's integral over it.
pub fn convolve(events: &[Event], hrf: &DoubleGamma, timing: Timing) -> Vec<f64> {
    let dt = timing.dt();
    let kernel = hrf.sampled(dt);
    let x = microtime_input(events, timing);
    (0..timing.scans)
        .map(|n| {
            let m = n * timing.bins;
            dt * kernel
                .iter()
                .take(m + 1)
                .enumerate()
                .map(|(j, k)| k * x[m - j])
                .sum::<f64>()
        })
        .collect()
}

// ---------------------------------------------------------------------------------------------
// Design matrices

/// One design matrix: name stem, run, column names, columns (one value per scan), sidecar, and
/// what fell outside the scans.
#[derive(Clone, Debug, PartialEq)]
pub struct DesignFile {
    /// Path relative to the dataset folder, without extension: the events file's with
    /// `_design` for `_events` (`sub-<label>/func/sub-<label>_task-<task>[_run-<index>]
    /// _desc-<model>_design`), so that the matrix sits beside its events file.
    pub stem: String,
    /// Run label of the trial table.
    pub run: String,
    /// Column names, in order.
    pub header: Vec<String>,
    /// Columns, each with one value per scan.
    pub columns: Vec<Vec<f64>>,
    /// JSON sidecar: timing, response parameters, scaling and every column.
    pub sidecar: serde_json::Value,
    /// Events whose onset is at or after the end of the last scan (left out).
    pub events_after_last_scan: usize,
    /// End of the latest event, onset + duration (s).
    pub events_end: f64,
    /// Columns that are zero at every scan (a GLM cannot estimate them).
    pub zero_columns: Vec<String>,
}

impl DesignFile {
    /// Writes the matrix as tab-separated values: a header row, then one row per scan.
    pub fn write_tsv(&self, w: &mut dyn Write) -> std::io::Result<()> {
        writeln!(w, "{}", self.header.join("\t"))?;
        let scans = self.columns.first().map_or(0, Vec::len);
        for n in 0..scans {
            // + 0.0 writes −0 (a sum of negative zeros) as 0.
            let row: Vec<String> = self
                .columns
                .iter()
                .map(|c| crate::results::number_text(c[n] + 0.0))
                .collect();
            writeln!(w, "{}", row.join("\t"))?;
        }
        Ok(())
    }
}

/// The design matrix of one events file: a unit-amplitude regressor per event type (`choice`,
/// and `outcome` when `with_outcomes`) and one per modulator column of the file (those of
/// outcome events only when `with_outcomes`), each event keeping its onset and duration (the
/// choice event lasts the response time) and the modulator its value as written in the events
/// file (scaled as `scale` says; `n/a` contributes 0), convolved and sampled with
/// [`convolve`]. The events were built by [`super::events_files`].
pub fn design_file(
    events: &EventsFile,
    hrf: &DoubleGamma,
    timing: Timing,
    scale: Scale,
    with_outcomes: bool,
) -> DesignFile {
    use serde_json::json;
    // The events file sits in the same folder: its name alone.
    let events_name = events.stem.rsplit('/').next().unwrap_or(&events.stem);
    let types: &[&'static str] = if with_outcomes {
        &["choice", "outcome"]
    } else {
        &["choice"]
    };
    let mut header = Vec::new();
    let mut columns = Vec::new();
    let mut described = serde_json::Map::new();
    for &kind in types {
        let regressor: Vec<Event> = events
            .timing
            .iter()
            .filter(|e| e.trial_type == kind)
            .map(|e| Event {
                onset: e.onset,
                duration: e.duration,
                amplitude: 1.0,
            })
            .collect();
        header.push(kind.to_string());
        columns.push(convolve(&regressor, hrf, timing));
        described.insert(
            kind.into(),
            json!({
                "LongName": format!("{kind} events"),
                "Description": format!(
                    "Every `{kind}` event of {}.tsv with amplitude 1 and the event's duration \
                     there ({}), convolved with the haemodynamic response and sampled at the \
                     start of each scan.",
                    events_name,
                    if kind == "choice" { "the response time; 0, an impulse, without response" }
                    else { "0: an impulse" }
                ),
                "Units": "arbitrary (1 = the plateau of a sustained unit input)",
            }),
        );
    }
    for m in events
        .modulators
        .iter()
        .filter(|m| types.contains(&m.trial_type))
    {
        let regressor: Vec<Event> = events
            .timing
            .iter()
            .zip(&m.values)
            .filter(|(e, _)| e.trial_type == m.trial_type)
            .map(|(e, v)| Event {
                onset: e.onset,
                duration: e.duration,
                amplitude: v.unwrap_or(0.0),
            })
            .collect();
        header.push(m.name.to_string());
        columns.push(convolve(&regressor, hrf, timing));
        let source = &events.sidecar[m.name.as_str()];
        described.insert(
            m.name.clone(),
            json!({
                "LongName": format!(
                    "{} (parametric modulator of the {} events, convolved)",
                    source["LongName"].as_str().unwrap_or(&m.name),
                    m.trial_type
                ),
                "Description": format!(
                    "The `{}` column of {}.tsv as the amplitude of each `{}` event (n/a \
                     counts as 0), with the event's onset and duration, convolved with the \
                     haemodynamic response and sampled at the start of each scan. The events \
                     file says: {}",
                    m.name,
                    events_name,
                    m.trial_type,
                    source["Description"].as_str().unwrap_or("")
                ),
                "Units": source["Units"].clone(),
            }),
        );
    }
    let end = timing.end();
    let events_after_last_scan = events.timing.iter().filter(|e| e.onset >= end).count();
    let events_end = events
        .timing
        .iter()
        .map(|e| e.onset + e.duration)
        .fold(0.0, f64::max);
    let zero_columns = header
        .iter()
        .zip(&columns)
        .filter(|(_, c)| c.iter().all(|&y| y == 0.0))
        .map(|(h, _)| h.clone())
        .collect();
    let sidecar = json!({
        "RepetitionTime": timing.tr,
        "NumberOfVolumes": timing.scans,
        "SamplingTime": "start of each scan: row n (0-based) is t = n · RepetitionTime seconds \
                         from the start of the first volume (reference: the first acquired slice)",
        "TimeGridBinsPerScan": timing.bins,
        "TimeGridStep": timing.dt(),
        "HaemodynamicResponse": {
            "Form": "canonical double gamma: h(t) = t^(a1-1) b1^a1 exp(-b1 t) / Gamma(a1) \
                     - c t^(a2-1) b2^a2 exp(-b2 t) / Gamma(a2)",
            "Sources": "double-gamma form: Friston et al. 1998; Glover 1999; parameter values: common practice",
            "PeakShape": hrf.peak_shape,
            "PeakRate": hrf.peak_rate,
            "UndershootShape": hrf.undershoot_shape,
            "UndershootRate": hrf.undershoot_rate,
            "UndershootRatio": hrf.ratio,
            "KernelLength": hrf.length,
            "PeakTime": hrf.peak_time(),
            "Normalisation": "unit area on the microtime grid: k_j = h(j d) / (d sum_i h(i d)), \
                              d the microtime resolution",
        },
        "ModulatorScaling": match scale {
            Scale::Center => "mean-centred within the run, as in the events file",
            Scale::Zscore => "z-scored within the run (sd with n - 1), as in the events file",
            Scale::None => "raw, as in the events file",
        },
        "EventsFile": format!("{}.tsv", events_name),
        "EventsAfterLastScan": events_after_last_scan,
        "Columns": header,
        "ColumnDescriptions": described,
    });
    DesignFile {
        stem: design_stem(&events.stem),
        run: events.run.clone(),
        header,
        columns,
        sidecar,
        events_after_last_scan,
        events_end,
        zero_columns,
    }
}

/// `…_events` → `…_design`.
fn design_stem(events_stem: &str) -> String {
    format!(
        "{}_design",
        events_stem.strip_suffix("_events").unwrap_or(events_stem)
    )
}

//! What a build tells afterwards: the build report (written into the atlas as build-report.json)
//! and the lap times and memory of its stages.

use vitrine_images::thumbs::ImageProblem;

use crate::catalogue::ValueWarning;

#[derive(Debug, Default, serde::Serialize)]
pub struct BuildReport {
    pub items: usize,
    /// Seconds per stage, in order, and the process's peak resident memory (Linux) in MiB.
    pub stages: Vec<(String, f64)>,
    /// Per stage (in the order of `stages`), the process's peak resident memory during it in MiB,
    /// where the system tells (Linux).
    pub stage_peak_memory_mib: Vec<Option<f64>>,
    /// Per stage, the resident memory when it began, in MiB (what earlier stages left held).
    pub stage_start_memory_mib: Vec<Option<f64>>,
    pub peak_memory_mib: Option<f64>,
    pub image_problems: Vec<ImageProblem>,
    /// Thumbnails made from their image files, and taken unchanged from the thumbnail cache.
    pub thumbnails_made: usize,
    pub thumbnails_reused: usize,
    pub value_warnings: Vec<ValueWarning>,
    /// Copies looked for: candidate pairs checked, pairs confirmed, groups and items in them.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub copies: Option<CopiesFound>,
    pub notes: Vec<String>,
}

#[derive(Debug, Default, Clone, serde::Serialize)]
pub struct CopiesFound {
    pub candidates: usize,
    pub confirmed: usize,
    pub groups: usize,
    pub items: usize,
}

/// Lap times of the build's stages, and each stage's peak memory.
pub struct Laps {
    last: std::time::Instant,
    pub laps: Vec<(String, f64)>,
    pub peaks: Vec<Option<f64>>,
    pub starts: Vec<Option<f64>>,
    start: Option<f64>,
    /// The largest peak so far, kept across the per-stage resets.
    overall: Option<f64>,
}

impl Laps {
    pub fn new() -> Laps {
        reset_peak_memory();
        Laps {
            last: std::time::Instant::now(),
            laps: Vec::new(),
            peaks: Vec::new(),
            starts: Vec::new(),
            start: memory_mib("VmRSS:"),
            overall: None,
        }
    }
    /// Ends the stage under way, named `name`.
    pub fn lap(&mut self, name: &str) {
        let now = std::time::Instant::now();
        self.laps
            .push((name.to_string(), (now - self.last).as_secs_f64()));
        let peak = peak_memory_mib();
        self.overall = match (self.overall, peak) {
            (Some(a), Some(b)) => Some(a.max(b)),
            (a, b) => a.or(b),
        };
        self.peaks.push(peak);
        self.starts.push(self.start);
        // Each stage's peak is its own: the high-water mark starts again from what is resident.
        reset_peak_memory();
        self.start = memory_mib("VmRSS:");
        self.last = now;
    }
}

/// Peak resident memory of this process in MiB since it started or since the last
/// [`reset_peak_memory`] (Linux: VmHWM), if the system tells.
pub fn peak_memory_mib() -> Option<f64> {
    memory_mib("VmHWM:")
}

/// A memory line of /proc/self/status in MiB.
fn memory_mib(key: &str) -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with(key))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

/// Restarts the peak-memory mark from the current resident size (Linux: writing 5 to
/// /proc/self/clear_refs); elsewhere, or when refused, the mark keeps counting from the start.
fn reset_peak_memory() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

impl Default for Laps {
    fn default() -> Laps {
        Laps::new()
    }
}

impl BuildReport {
    /// Takes the laps measured so far.
    pub fn set_laps(&mut self, laps: &Laps) {
        self.stages = laps.laps.clone();
        self.stage_peak_memory_mib = laps.peaks.clone();
        self.stage_start_memory_mib = laps.starts.clone();
        self.peak_memory_mib = laps.overall;
    }
}

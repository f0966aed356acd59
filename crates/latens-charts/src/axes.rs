//! Axes whose ticks fall on round values: plotters' own key points of a
//! float range are round in the plotted unit, which for a logarithmic
//! quantity gives labels such as "3162.278". A [`TickedAxis`] maps linearly
//! like a float range but ticks where it is told: at 1-2-5 multiples of
//! powers of ten ([`log_ticks`], for log10 coordinates) or at round steps
//! ([`linear_ticks`]).

use plotters::coord::ranged1d::{DefaultFormatting, KeyPointHint, Ranged};

/// A linear axis over `range` with ticks at `keys`.
#[derive(Clone, Debug)]
pub struct TickedAxis {
    pub range: std::ops::Range<f64>,
    pub keys: Vec<f64>,
}

impl TickedAxis {
    /// An axis of log10 values ticked at round values of the quantity.
    pub fn log(range: std::ops::Range<f64>) -> TickedAxis {
        let keys = log_ticks(range.start, range.end);
        TickedAxis { range, keys }
    }

    /// An axis ticked at about `n` round steps.
    pub fn linear(range: std::ops::Range<f64>, n: usize) -> TickedAxis {
        let keys = linear_ticks(range.start, range.end, n);
        TickedAxis { range, keys }
    }
}

impl Ranged for TickedAxis {
    type FormatOption = DefaultFormatting;
    type ValueType = f64;

    fn map(&self, value: &f64, limit: (i32, i32)) -> i32 {
        let f = (value - self.range.start) / (self.range.end - self.range.start);
        limit.0 + (f * f64::from(limit.1 - limit.0)).round() as i32
    }

    fn key_points<Hint: KeyPointHint>(&self, _hint: Hint) -> Vec<f64> {
        self.keys.clone()
    }

    fn range(&self) -> std::ops::Range<f64> {
        self.range.clone()
    }
}

/// Log10 positions of the round values (1, 2, 5 times a power of ten)
/// inside [lo, hi] (log10 units); only the powers of ten over more than
/// three decades.
pub fn log_ticks(lo: f64, hi: f64) -> Vec<f64> {
    let mut out = Vec::new();
    let steps: &[f64] = if hi - lo > 3.0 { &[1.0] } else { &[1.0, 2.0, 5.0] };
    let mut k = lo.floor() as i32;
    while f64::from(k) <= hi {
        for m in steps {
            let v = f64::from(k) + m.log10();
            if v >= lo - 1e-9 && v <= hi + 1e-9 {
                out.push(v);
            }
        }
        k += 1;
    }
    out
}

/// About `n` ticks at a round step (1, 2 or 5 times a power of ten, the
/// one nearest a span over `n`) inside [lo, hi].
pub fn linear_ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    if hi.partial_cmp(&lo) != Some(std::cmp::Ordering::Greater) || n == 0 {
        return vec![lo];
    }
    let raw = (hi - lo) / n as f64;
    let p = 10f64.powf(raw.log10().floor());
    // The round step nearest the raw one (in ratio).
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * p)
        .min_by(|a, b| (a / raw).ln().abs().total_cmp(&(b / raw).ln().abs()))
        .unwrap_or(p);
    let mut v = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while v <= hi + 1e-9 * step {
        // Snap to the step so that 0.30000000000000004 prints as 0.3.
        out.push((v / step).round() * step);
        v += step;
    }
    out
}

/// A tick value without spurious digits: 0.1, 2, 50, 1000, -0.5; never
/// "-0".
pub fn round_label(v: f64) -> String {
    let v = if v.abs() < 1e-12 { 0.0 } else { v };
    let text = if v.abs() >= 100.0 || v == v.round() { format!("{v:.0}") } else { format!("{v:.3}") };
    let text = if text.contains('.') { text.trim_end_matches('0').trim_end_matches('.').to_string() } else { text };
    if text == "-0" { "0".into() } else { text }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn log_ticks_sit_at_round_values_inside_the_axis() {
        let labels = |t: Vec<f64>| t.iter().map(|v| round_label(10f64.powf(*v))).collect::<Vec<_>>();
        assert_eq!(labels(log_ticks(-1.05, 4.05)), ["0.1", "1", "10", "100", "1000", "10000"]);
        let t = log_ticks(0.98, 3.02);
        assert!(t.iter().all(|v| (0.98..=3.02).contains(v)));
        assert_eq!(labels(t), ["10", "20", "50", "100", "200", "500", "1000"]);
    }

    #[test]
    fn linear_ticks_take_a_round_step() {
        let t: Vec<String> = linear_ticks(17.3, 62.8, 4).iter().map(|v| round_label(*v)).collect();
        assert_eq!(t, ["20", "30", "40", "50", "60"]);
        let t: Vec<String> = linear_ticks(-0.31, 0.42, 4).iter().map(|v| round_label(*v)).collect();
        assert_eq!(t, ["-0.2", "0", "0.2", "0.4"]);
    }

    #[test]
    fn labels_have_no_spurious_digits() {
        assert_eq!(round_label(0.316227766), "0.316");
        assert_eq!(round_label(0.5), "0.5");
        assert_eq!(round_label(2.0), "2");
        assert_eq!(round_label(1000.0000001), "1000");
        assert_eq!(round_label(-0.0), "0");
        assert_eq!(round_label(-1e-15), "0");
    }
}

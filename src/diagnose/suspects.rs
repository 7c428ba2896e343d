//! Suspect stretches: runs of consecutive frames whose agreement is well below the run's
//! typical value.
//!
//! Typical is the median of the frames' agreements, spread the median absolute deviation
//! scaled by 1.4826 (a robust estimate of the standard deviation for normal data; common
//! practice, e.g. Rousseeuw & Croux, "Alternatives to the median absolute deviation", JASA
//! 1993). A frame is low when its agreement is below typical - max(3 spread, 0.1); low frames
//! at most two frames apart join one stretch.

use super::FrameAgreement;
use std::ops::Range;

/// Frames between two low frames that still join them into one stretch.
pub const JOIN_GAP: usize = 2;

/// The smallest drop below the median that marks a frame low, however steady the run.
pub const MIN_DROP: f64 = 0.1;

/// The run's typical agreement and the threshold below which a frame is low.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Typical {
    /// Median agreement.
    pub median: f64,
    /// 1.4826 x the median absolute deviation.
    pub spread: f64,
    /// Frames below this are low.
    pub cut: f64,
}

/// Consecutive low frames.
#[derive(Clone, Debug, PartialEq)]
pub struct Stretch {
    /// The frames, first to last + 1.
    pub frames: Range<usize>,
    /// Start and end time, seconds.
    pub times: (f64, f64),
    /// Lowest agreement in the stretch.
    pub lowest: f64,
    /// Mean agreement of the stretch's low frames.
    pub mean: f64,
}

fn median(v: &mut [f64]) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// The typical agreement of `frames` and the stretches well below it, in frame order. `None`
/// when no frame has an agreement.
pub fn suspect_stretches(frames: &[FrameAgreement]) -> Option<(Typical, Vec<Stretch>)> {
    let mut values: Vec<f64> = frames.iter().filter_map(|f| f.agreement()).collect();
    if values.is_empty() {
        return None;
    }
    let m = median(&mut values);
    let mut deviations: Vec<f64> = values.iter().map(|v| (v - m).abs()).collect();
    let spread = 1.4826 * median(&mut deviations);
    let typical = Typical {
        median: m,
        spread,
        cut: m - (3.0 * spread).max(MIN_DROP),
    };
    let mut out: Vec<Stretch> = Vec::new();
    let mut open: Option<(usize, usize)> = None; // first and last low frame (positions)
    let close = |(a, b): (usize, usize), out: &mut Vec<Stretch>| {
        let part = &frames[a..=b];
        let vals: Vec<f64> = part
            .iter()
            .filter_map(|f| f.agreement())
            .filter(|v| *v < typical.cut)
            .collect();
        out.push(Stretch {
            frames: part[0].frame..part[part.len() - 1].frame + 1,
            times: (part[0].t, part[part.len() - 1].t),
            lowest: vals.iter().copied().fold(f64::INFINITY, f64::min),
            mean: vals.iter().sum::<f64>() / vals.len().max(1) as f64,
        });
    };
    for (i, f) in frames.iter().enumerate() {
        if f.agreement().is_some_and(|a| a < typical.cut) {
            open = match open {
                Some((a, b)) if i - b <= JOIN_GAP + 1 => Some((a, i)),
                Some(run) => {
                    close(run, &mut out);
                    Some((i, i))
                }
                None => Some((i, i)),
            };
        }
    }
    if let Some(run) = open {
        close(run, &mut out);
    }
    Some((typical, out))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn run(values: &[f64]) -> Vec<FrameAgreement> {
        values
            .iter()
            .enumerate()
            .map(|(i, &v)| FrameAgreement {
                frame: i,
                t: i as f64 * 0.1,
                counted: 1000,
                agreeing: (v * 1000.0).round() as u32,
                crossed: 0,
            })
            .collect()
    }

    #[test]
    fn a_dip_becomes_one_stretch_with_short_gaps_joined() {
        let mut v = vec![0.9; 40];
        for (i, x) in v.iter_mut().enumerate() {
            *x += 0.01 * ((i % 3) as f64 - 1.0);
        }
        for i in [10, 11, 13, 14, 15] {
            v[i] = 0.4;
        }
        v[30] = 0.5;
        let (typical, s) = suspect_stretches(&run(&v)).unwrap();
        assert!((typical.median - 0.9).abs() < 0.011, "{typical:?}");
        assert_eq!(s.len(), 2, "{s:?}");
        assert_eq!(s[0].frames, 10..16);
        assert!((s[0].lowest - 0.4).abs() < 1e-9);
        assert!(
            (s[0].mean - 0.4).abs() < 1e-9,
            "frame 12 is not low and not counted"
        );
        assert_eq!(s[1].frames, 30..31);
    }

    #[test]
    fn a_steady_run_has_no_suspects_and_an_empty_one_no_typical() {
        let (_, s) = suspect_stretches(&run(&[0.8; 20])).unwrap();
        assert!(s.is_empty());
        assert!(suspect_stretches(&[FrameAgreement::default()]).is_none());
    }
}

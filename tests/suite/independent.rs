//! gridscope against an independent implementation of the file contract, on random sessions
//! nobody has seen before.
//!
//! The reference below is written from `formats.md` alone, in the plainest way: footprints by
//! brute force over candidate cells (open-interior crossing for rays, centre-in-sector for
//! cones), the model formulas in f64 with no tables, and fusion in f64 over a hash map. It
//! shares only the session data structure and the grid geometry with gridscope.

use super::{TestRng, enters_box};
use gridscope::params::Exclusions;
use gridscope::session::{BeamAngles, Sensor};
use gridscope::{
    CellIndex, Clamp, FusionRule, GridSpec, MapBuilder, ModelSpec, NoReturnRule, Params, Point2,
    Pose2, SensorKind, Session,
};
use std::collections::HashMap;
use std::sync::Arc;

fn random_model(r: &mut TestRng) -> ModelSpec {
    let p_occ = r.range(0.55, 0.95);
    let p_free = r.range(0.1, 0.45);
    if r.unit() < 0.5 {
        ModelSpec::Gaussian {
            sigma: r.range(0.02, 0.2),
            p_occ,
            p_free,
            cutoff: r.range(0.0, 4.0),
        }
    } else {
        ModelSpec::Band {
            thickness: r.range(0.05, 0.4),
            p_occ,
            p_free,
        }
    }
}

pub fn random_session(r: &mut TestRng) -> Session {
    let mut sensors = vec![Sensor {
        id: "laser".into(),
        kind: SensorKind::Ray,
        mount: Pose2::new(r.range(-0.2, 0.2), r.range(-0.2, 0.2), r.range(-0.5, 0.5)),
        angles: BeamAngles::Fan {
            start: r.range(-3.0, 0.0),
            step: r.range(0.01, 0.2),
            count: 5 + (r.unit() * 40.0) as usize,
        },
        range_min: r.range(0.02, 0.2),
        range_max: r.range(3.0, 7.0),
        cone_width: 0.0,
    }];
    if r.unit() < 0.7 {
        let n = 1 + (r.unit() * 6.0) as usize;
        sensors.push(Sensor {
            id: "sonar".into(),
            kind: SensorKind::Cone,
            mount: Pose2::new(r.range(-0.2, 0.2), r.range(-0.2, 0.2), r.range(-3.0, 3.0)),
            angles: BeamAngles::List((0..n).map(|_| r.range(-3.1, 3.1)).collect()),
            range_min: r.range(0.05, 0.2),
            range_max: r.range(1.5, 4.0),
            cone_width: r.range(0.15, 0.9),
        });
    }
    let mut s = Session::with_sensors("random".into(), String::new(), sensors.clone()).unwrap();
    let mut t = 0.0;
    for _ in 0..(10 + (r.unit() * 30.0) as usize) {
        t += r.range(0.0, 0.3);
        let pose = Pose2::new(r.range(0.0, 6.0), r.range(0.0, 6.0), r.range(-3.2, 3.2));
        let mut owned: Vec<(String, Vec<f32>)> = Vec::new();
        for sensor in &sensors {
            if r.unit() < 0.15 {
                continue; // a frame may omit a sensor
            }
            let ranges = (0..sensor.beam_count())
                .map(|_| {
                    let u = r.unit();
                    if u < 0.08 {
                        [
                            f32::NAN,
                            -1.0,
                            (sensor.range_min * 0.5) as f32,
                            f32::INFINITY,
                        ][(r.unit() * 4.0) as usize]
                    } else if u < 0.18 {
                        (sensor.range_max + r.range(0.0, 2.0) * (r.unit() < 0.5) as u8 as f64)
                            as f32
                    } else {
                        r.range(sensor.range_min, sensor.range_max) as f32
                    }
                })
                .collect();
            owned.push((sensor.id.clone(), ranges));
        }
        let scans: Vec<(&str, &[f32])> = owned
            .iter()
            .map(|(id, v)| (id.as_str(), v.as_slice()))
            .collect();
        s.push_frame(t, pose, &scans).unwrap();
    }
    s
}

pub fn random_params(r: &mut TestRng) -> Params {
    let mut models = std::collections::BTreeMap::new();
    if r.unit() < 0.6 {
        models.insert("sonar".to_string(), random_model(r));
    }
    Params {
        format: 1,
        resolution: r.range(0.04, 0.15),
        prior: r.range(0.3, 0.7),
        clamp: Clamp {
            min: r.range(-4.0, -0.5),
            max: r.range(0.5, 5.0),
        },
        fusion: if r.unit() < 0.5 {
            FusionRule::EveryBeam
        } else {
            FusionRule::OncePerCell
        },
        no_return: if r.unit() < 0.7 {
            NoReturnRule::Clear
        } else {
            NoReturnRule::Ignore
        },
        default_model: random_model(r),
        models,
        extent: None,
        exclude: Exclusions::default(),
        calibration: Default::default(),
    }
}

// ----- the independent implementation --------------------------------------------------------

/// An angle in radians wrapped to [-pi, pi].
fn wrap_angle(a: f64) -> f64 {
    let w = a.rem_euclid(std::f64::consts::TAU);
    if w > std::f64::consts::PI {
        w - std::f64::consts::TAU
    } else {
        w
    }
}

fn logit(p: f64) -> f64 {
    (p / (1.0 - p)).ln()
}

/// Section 4 of the contract, radial profile for a hit.
fn radial(m: &ModelSpec, d: f64, z: f64) -> f64 {
    match *m {
        ModelSpec::Gaussian {
            sigma,
            p_occ,
            p_free,
            ..
        } => {
            let g = (-(d - z).powi(2) / (2.0 * sigma * sigma)).exp();
            if d <= z {
                f64::max(p_free, p_occ * g)
            } else {
                0.5 + (p_occ - 0.5) * g
            }
        }
        ModelSpec::Band {
            thickness,
            p_occ,
            p_free,
        } => {
            if (d - z).abs() <= thickness / 2.0 {
                p_occ
            } else if d < z - thickness / 2.0 {
                p_free
            } else {
                0.5 // past the band: no information (Thrun et al. 2005, Table 9.2)
            }
        }
    }
}

/// Cells a beam touches with their probability, in footprint order.
fn reference_footprint(
    spec: &GridSpec,
    sensor: &Sensor,
    m: &ModelSpec,
    p: &Params,
    origin: Point2,
    heading: f64,
    raw: f32,
) -> Vec<(CellIndex, f64)> {
    let r = raw as f64;
    // The contract's classes: NaN, negative values (negative infinity included) and values below
    // range_min are invalid; values at or above range_max, positive infinity included, are
    // no-returns (file contract, section 2).
    let hit = if r.is_nan() || r < 0.0 || r < sensor.range_min {
        return vec![];
    } else if r >= sensor.range_max {
        if p.no_return == NoReturnRule::Ignore {
            return vec![];
        }
        None
    } else {
        Some(r)
    };
    let p_free = match *m {
        ModelSpec::Gaussian { p_free, .. } | ModelSpec::Band { p_free, .. } => p_free,
    };
    let reach = match (hit, m) {
        (None, _) => sensor.range_max,
        (Some(z), ModelSpec::Gaussian { sigma, cutoff, .. }) => z + cutoff * sigma,
        (Some(z), ModelSpec::Band { thickness, .. }) => z + thickness / 2.0,
    };
    let prob = |d: f64| match hit {
        Some(z) => radial(m, d, z),
        None => p_free,
    };
    let res = spec.resolution;
    let cell_box = |c: CellIndex| {
        let lo = Point2::new(
            spec.origin.x + c.col as f64 * res,
            spec.origin.y + c.row as f64 * res,
        );
        (lo, Point2::new(lo.x + res, lo.y + res))
    };
    let centre = |c: CellIndex| {
        Point2::new(
            spec.origin.x + (c.col as f64 + 0.5) * res,
            spec.origin.y + (c.row as f64 + 0.5) * res,
        )
    };
    let floor_cell = |q: Point2| {
        CellIndex::new(
            ((q.x - spec.origin.x) / res).floor() as i64,
            ((q.y - spec.origin.y) / res).floor() as i64,
        )
    };
    let mut out = Vec::new();
    match sensor.kind {
        SensorKind::Ray => {
            let end = Point2::new(
                origin.x + reach * heading.cos(),
                origin.y + reach * heading.sin(),
            );
            let (a, b) = (floor_cell(origin), floor_cell(end));
            let mut cells = Vec::new();
            for row in a.row.min(b.row) - 1..=a.row.max(b.row) + 1 {
                for col in a.col.min(b.col) - 1..=a.col.max(b.col) + 1 {
                    let c = CellIndex::new(col, row);
                    let (lo, hi) = cell_box(c);
                    if let Some(t) = enters_box(origin, end, lo, hi) {
                        cells.push((t, c));
                    }
                }
            }
            cells.sort_by(|x, y| x.0.total_cmp(&y.0));
            for (_, c) in cells {
                out.push((c, prob(centre(c).distance(origin))));
            }
        }
        SensorKind::Cone => {
            let own = floor_cell(origin);
            let lo = floor_cell(Point2::new(origin.x - reach, origin.y - reach));
            let hi = floor_cell(Point2::new(origin.x + reach, origin.y + reach));
            for row in lo.row..=hi.row {
                for col in lo.col..=hi.col {
                    let c = CellIndex::new(col, row);
                    let q = centre(c);
                    let d = q.distance(origin);
                    let phi = if c == own {
                        0.0
                    } else {
                        wrap_angle((q.y - origin.y).atan2(q.x - origin.x) - heading)
                    };
                    if c == own || (d <= reach && phi.abs() <= sensor.cone_width / 2.0) {
                        let w = (1.0 - (2.0 * phi / sensor.cone_width).powi(2)).max(0.0);
                        out.push((c, 0.5 + w * (prob(d) - 0.5)));
                    }
                }
            }
        }
    }
    out
}

/// Section 6 of the contract, in f64: returns the value of every touched cell.
fn reference_build(session: &Session, p: &Params, spec: &GridSpec) -> HashMap<CellIndex, f64> {
    let mut grid: HashMap<CellIndex, f64> = HashMap::new();
    let l0 = logit(p.prior);
    let inside = |c: &CellIndex| {
        c.col >= 0 && c.row >= 0 && c.col < spec.width as i64 && c.row < spec.height as i64
    };
    for frame in &session.frames {
        let mut chosen: HashMap<CellIndex, Vec<f64>> = HashMap::new();
        for scan in &frame.scans {
            let sensor = &session.sensors[scan.sensor];
            let m = p.models.get(&sensor.id).unwrap_or(&p.default_model);
            let (s, c) = frame.pose.theta.sin_cos();
            let origin = Point2::new(
                frame.pose.x + c * sensor.mount.x - s * sensor.mount.y,
                frame.pose.y + s * sensor.mount.x + c * sensor.mount.y,
            );
            for (k, &raw) in session.ranges(*scan).iter().enumerate() {
                let heading = frame.pose.theta + sensor.mount.theta + sensor.angles.angle(k);
                for (cell, prob) in reference_footprint(spec, sensor, m, p, origin, heading, raw) {
                    if !inside(&cell) {
                        continue;
                    }
                    let inc = logit(prob);
                    match p.fusion {
                        FusionRule::EveryBeam => {
                            let v = grid.entry(cell).or_insert(l0);
                            *v = (*v + inc).clamp(p.clamp.min, p.clamp.max);
                        }
                        FusionRule::OncePerCell => chosen.entry(cell).or_default().push(inc),
                    }
                }
            }
        }
        for (cell, incs) in chosen {
            let max = incs.iter().cloned().fold(f64::NEG_INFINITY, f64::max);
            let min = incs.iter().cloned().fold(f64::INFINITY, f64::min);
            let inc = if max > 0.0 { max } else { min };
            let v = grid.entry(cell).or_insert(l0);
            *v = (*v + inc).clamp(p.clamp.min, p.clamp.max);
        }
    }
    grid
}

#[test]
fn agrees_with_an_independent_implementation_on_unseen_sessions() {
    let mut rng = TestRng(0x00C0_FFEE_1234_5678);
    let (mut agree, mut total) = (0usize, 0usize);
    for case in 0..40 {
        let session = Arc::new(random_session(&mut rng));
        let params = random_params(&mut rng);
        let builder = MapBuilder::new(session.clone(), params.clone()).unwrap();
        let spec = *builder.spec();
        let ours = builder.build(session.frames.len());
        let theirs = reference_build(&session, &params, &spec);
        // The default extent holds every touched cell with a margin: nothing the reference
        // touched may fall on the grid's edge rows or columns.
        let mut case_agree = 0;
        for (cell, want) in &theirs {
            assert!(
                cell.col >= 1
                    && cell.row >= 1
                    && cell.col < spec.width as i64 - 1
                    && cell.row < spec.height as i64 - 1,
                "case {case}: touched cell {cell:?} at the edge of {spec:?}"
            );
            let got = ours.get(*cell).unwrap() as f64;
            if (got - want).abs() <= 1e-3 {
                case_agree += 1;
            }
        }
        agree += case_agree;
        total += theirs.len();
        assert!(
            case_agree as f64 >= 0.99 * theirs.len() as f64,
            "case {case}: {case_agree}/{}",
            theirs.len()
        );
        // Cells the reference never touched keep the prior in gridscope too.
        let l0 = gridscope::logit(params.prior) as f32;
        let untouched_changed = ours
            .values()
            .iter()
            .enumerate()
            .filter(|(i, v)| **v != l0 && !theirs.contains_key(&spec.cell_of_index(*i)))
            .count();
        assert!(
            untouched_changed as f64 <= 0.005 * theirs.len() as f64 + 2.0,
            "case {case}: {untouched_changed}"
        );
    }
    let share = agree as f64 / total as f64;
    eprintln!(
        "independent implementation: {agree} of {total} touched cells agree within 1e-3 ({:.4}%)",
        100.0 * share
    );
    assert!(share >= 0.995, "{share}");
}

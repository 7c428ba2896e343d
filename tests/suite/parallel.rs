//! The fast rebuild is bit-identical to the plain loop, on one thread or many, on every
//! sample session and on random sessions (fixed extents that cut beams, exclusions, both
//! fusion rules).

use super::TestRng;
use super::independent::{random_params, random_session};
use gridscope::demo::{self, DEMOS};
use gridscope::params::{Extent, SensorCorrection};
use gridscope::{Grid, MapBuilder, Params, Point2, Session};
use std::sync::Arc;

fn bits(g: &Grid) -> Vec<u32> {
    g.values().iter().map(|v| v.to_bits()).collect()
}

/// Builds with the plain loop, and with the fast rebuild on 1, 2, 3, 8 and 16 threads (more
/// threads than this machine has cores, so tiles run ahead of each other in every order); all
/// must agree.
fn assert_all_agree(session: Arc<Session>, params: Params, what: &str) {
    let builder = MapBuilder::new(session.clone(), params).unwrap();
    let n = session.frames.len();
    let mut plain = builder.blank();
    builder.integrate_plain(&mut plain, 0..n);
    let reference = bits(&plain);
    for threads in [1, 2, 3, 8, 16] {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        let fast = pool.install(|| builder.build(n));
        assert!(
            bits(&fast) == reference,
            "{what}: {threads} threads differ from the plain loop"
        );
        // Integrating in two pieces gives the same grid as in one.
        let mut split = builder.blank();
        pool.install(|| {
            builder.integrate(&mut split, 0..n / 3);
            builder.integrate(&mut split, n / 3..n);
        });
        assert!(
            bits(&split) == reference,
            "{what}: {threads} threads, in two pieces"
        );
    }
}

#[test]
fn every_sample_session() {
    for d in DEMOS {
        let s = Arc::new(demo::session(d.name).unwrap());
        assert_all_agree(s.clone(), demo::params(d.name).unwrap(), d.name);
        let mut other = demo::params(d.name).unwrap();
        other.fusion = match other.fusion {
            gridscope::FusionRule::EveryBeam => gridscope::FusionRule::OncePerCell,
            gridscope::FusionRule::OncePerCell => gridscope::FusionRule::EveryBeam,
        };
        assert_all_agree(s, other, d.name);
    }
}

#[test]
fn random_sessions_with_cut_extents_and_exclusions() {
    let mut rng = TestRng(0x5EED_0000_1234_ABCD);
    for case in 0..25 {
        let session = Arc::new(random_session(&mut rng));
        let mut params = random_params(&mut rng);
        if case % 3 == 1 {
            // A fixed extent smaller than the session: beams start and end outside it.
            params.extent = Some(Extent {
                origin: Point2::new(1.0 + rng.unit(), 0.5 + rng.unit()),
                width: 20 + (rng.unit() * 40.0) as u32,
                height: 15 + (rng.unit() * 40.0) as u32,
            });
        }
        if case % 4 == 2 {
            params.exclude.frames.push(2..=4);
            params.exclude.beams.push((1, "laser".into(), 3));
        }
        if case % 5 == 3 {
            // Mount and clock corrections move every beam of the sensor, on every route.
            params.calibration.insert(
                "laser".into(),
                SensorCorrection {
                    mount_x: rng.range(-0.2, 0.2),
                    mount_y: rng.range(-0.2, 0.2),
                    mount_theta: rng.range(-0.1, 0.1),
                    time_offset: rng.range(-0.3, 0.3),
                },
            );
        }
        assert_all_agree(session, params, &format!("random case {case}"));
    }
}

/// Cells above the upper clamp bound: a prior beyond it (untouched cells keep it), and a grid
/// whose values came from elsewhere. The fast rebuild leaves out the upper comparison for free
/// increments only when it has checked that no cell is above the bound (it checks when the
/// frames bring at least one beam per 64 cells), so both must still match the plain loop: on
/// random sessions (small, checked or not) and on a demo run (long enough to be checked).
#[test]
fn cells_above_the_upper_bound() {
    let mut rng = TestRng(0xAB0E_0000_0000_0042);
    let demo_run = Arc::new(demo::session("door-cycle").unwrap());
    for case in 0..6 {
        let (session, mut params) = if case < 4 {
            (Arc::new(random_session(&mut rng)), random_params(&mut rng))
        } else {
            (demo_run.clone(), demo::params("door-cycle").unwrap())
        };
        params.fusion = gridscope::FusionRule::EveryBeam;
        // logit(0.9) = 2.2 lies above this upper bound; logit(0.1) below the lower one.
        params.clamp.max = 1.0;
        params.clamp.min = -1.0;
        params.prior = if case % 2 == 0 { 0.9 } else { 0.1 };
        assert_all_agree(
            session.clone(),
            params.clone(),
            &format!("prior case {case}"),
        );

        // A grid with values on both sides of the bounds, integrated by both loops.
        params.prior = 0.5;
        let builder = MapBuilder::new(session.clone(), params).unwrap();
        let mut start = builder.blank();
        for v in start.values_mut() {
            *v = rng.range(-3.0, 3.0) as f32;
        }
        let n = session.frames.len();
        let mut plain = start.clone();
        builder.integrate_plain(&mut plain, 0..n);
        for threads in [1, 2] {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let mut fast = start.clone();
            pool.install(|| builder.integrate(&mut fast, 0..n));
            assert!(
                bits(&fast) == bits(&plain),
                "grid case {case}: {threads} threads differ from the plain loop"
            );
        }
    }
}

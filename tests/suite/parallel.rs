//! The fast rebuild is bit-identical to the plain loop, on one thread or many, on every
//! sample session and on random sessions (fixed extents that cut beams, exclusions, both
//! fusion rules).

use super::TestRng;
use super::independent::{random_params, random_session};
use gridscope::demo::{self, DEMOS};
use gridscope::params::Extent;
use gridscope::{Grid, MapBuilder, Params, Point2, Session};
use std::sync::Arc;

fn bits(g: &Grid) -> Vec<u32> {
    g.values().iter().map(|v| v.to_bits()).collect()
}

/// Builds with the plain loop, and with the fast rebuild on 1, 2 and 3 threads; all must agree.
fn assert_all_agree(session: Arc<Session>, params: Params, what: &str) {
    let builder = MapBuilder::new(session.clone(), params).unwrap();
    let n = session.frames.len();
    let mut plain = builder.blank();
    builder.integrate_plain(&mut plain, 0..n);
    let reference = bits(&plain);
    for threads in [1, 2, 3] {
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
        assert_all_agree(session, params, &format!("random case {case}"));
    }
}

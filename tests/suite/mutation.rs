//! Thousands of seeded random mutations of the sample files (sessions, profiles, plans, bundle
//! metadata and arrays, packed session arrays) go through every reader: none may panic, and
//! every refusal names the file it came from. Accepted mutants are built too, on a small cell
//! budget, so the fusion meets odd but valid values.

use super::{TestRng, scratch};
use gridscope::demo::{self, DEMOS};
use gridscope::export::bundle_from_parts;
use gridscope::sim::FloorPlan;
use gridscope::{MapBuilder, Params, Session};
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::Arc;

/// Values that break numbers in interesting ways.
const NUMBERS: &[&str] = &[
    "NaN",
    "inf",
    "-inf",
    "1e308",
    "-1e308",
    "0",
    "-0.0",
    "1e-320",
    "-1",
    "3.5e38",
    "18446744073709551615",
    "-9223372036854775808",
    "4294967296",
    "1e-9",
    "0.5",
];

/// Words that fit in other places of the documents.
const WORDS: &[&str] = &[
    "Ray",
    "Cone",
    "Fan",
    "List",
    "Gaussian",
    "Band",
    "Clear",
    "Ignore",
    "EveryBeam",
    "OncePerCell",
    "None",
    "Some",
    "format",
    "frames",
    "x",
    "z",
    "\"\"",
    "[]",
    "()",
    "{}",
    ",",
    "(",
    ")",
    "[",
    "]",
    ":",
    "\"front\"",
    "//",
    "/*",
];

/// One random change to a text or a byte string.
fn mutate(rng: &mut TestRng, input: &[u8], text: bool) -> Vec<u8> {
    let mut v = input.to_vec();
    let pick = |rng: &mut TestRng, n: usize| (rng.next_u64() % n.max(1) as u64) as usize;
    let kind = pick(rng, if text { 7 } else { 5 });
    let at = pick(rng, v.len());
    match kind {
        0 => {
            if let Some(b) = v.get_mut(at) {
                *b ^= 1 << pick(rng, 8);
            }
        }
        1 => {
            let end = (at + pick(rng, 64)).min(v.len());
            v.drain(at..end);
        }
        2 => v.truncate(at),
        3 => {
            let end = (at + pick(rng, 64)).min(v.len());
            let copy = v[at..end].to_vec();
            v.splice(at..at, copy);
        }
        4 => {
            let junk: Vec<u8> = (0..pick(rng, 16) + 1)
                .map(|_| rng.next_u64() as u8)
                .collect();
            v.splice(at..at, junk);
        }
        5 => {
            // Replace the number that starts nearest after `at`.
            let s = String::from_utf8_lossy(&v).into_owned();
            if let Some(start) = s[at.min(s.len())..]
                .find(|c: char| c.is_ascii_digit())
                .map(|i| i + at.min(s.len()))
            {
                let end = s[start..]
                    .find(|c: char| !(c.is_ascii_digit() || c == '.' || c == 'e' || c == '-'))
                    .map_or(s.len(), |i| i + start);
                let mut out = s[..start].to_string();
                out.push_str(NUMBERS[pick(rng, NUMBERS.len())]);
                out.push_str(&s[end..]);
                v = out.into_bytes();
            }
        }
        _ => {
            let word = WORDS[pick(rng, WORDS.len())].as_bytes().to_vec();
            v.splice(at..at, word);
        }
    }
    v
}

/// Runs `read`, which must not panic; an error must name `label`.
fn survive<T>(what: &str, label: &str, read: impl FnOnce() -> Result<T, String>) -> Option<T> {
    match catch_unwind(AssertUnwindSafe(read)) {
        Err(_) => panic!("{what}: a reader panicked"),
        Ok(Err(message)) => {
            assert!(
                message.contains(label),
                "{what}: {message:?} does not name {label}"
            );
            None
        }
        Ok(Ok(v)) => Some(v),
    }
}

/// Builds a few frames of an accepted session under a small budget: refusals are fine,
/// panics are not.
fn build_some(session: Session, params: Params) {
    let session = Arc::new(session);
    if let Ok(b) = MapBuilder::with_budget(session, params, 200_000) {
        b.build(4);
        let _ = b.cell_history(gridscope::CellIndex::new(3, 3), 4);
    }
}

/// The first frames of a demo session, as text (short, so that thousands of parses are quick).
fn short_session(name: &str) -> String {
    let s = demo::session(name).unwrap();
    let mut short =
        Session::with_sensors(s.name.clone(), s.notes.clone(), s.sensors.clone()).unwrap();
    for f in s.frames.iter().take(4) {
        let owned: Vec<(String, Vec<f32>)> = f
            .scans
            .iter()
            .map(|sc| (s.sensors[sc.sensor].id.clone(), s.ranges(*sc).to_vec()))
            .collect();
        let scans: Vec<(&str, &[f32])> = owned
            .iter()
            .map(|(id, r)| (id.as_str(), r.as_slice()))
            .collect();
        short.push_frame(f.t, f.pose, &scans).unwrap();
    }
    short.to_ron_string()
}

#[test]
fn mutated_documents_never_panic_and_refusals_name_the_file() {
    let mut rng = TestRng(0x5EED_F00D_0BAD_CAFE);
    let mut accepted = 0;
    for d in DEMOS {
        let session = short_session(d.name);
        for _ in 0..250 {
            let text =
                String::from_utf8_lossy(&mutate(&mut rng, session.as_bytes(), true)).into_owned();
            let read = survive("session", "m.session.ron", || {
                Session::from_ron_str(&text, "m.session.ron").map_err(|e| e.to_string())
            });
            if let Some(s) = read {
                accepted += 1;
                build_some(s, demo::params(d.name).unwrap());
            }
        }
        for _ in 0..250 {
            let text =
                String::from_utf8_lossy(&mutate(&mut rng, d.params.as_bytes(), true)).into_owned();
            let read = survive("profile", "m.params.ron", || {
                Params::from_ron_str(&text, "m.params.ron").map_err(|e| e.to_string())
            });
            if let Some(p) = read {
                accepted += 1;
                build_some(demo::session(d.name).unwrap(), p);
            }
        }
        for _ in 0..150 {
            let text =
                String::from_utf8_lossy(&mutate(&mut rng, d.plan.as_bytes(), true)).into_owned();
            survive("plan", "m.plan.ron", || {
                FloorPlan::from_ron_str(&text, "m.plan.ron").map_err(|e| e.to_string())
            });
        }
        for _ in 0..150 {
            let meta =
                String::from_utf8_lossy(&mutate(&mut rng, d.reference_meta.as_bytes(), true))
                    .into_owned();
            survive("bundle metadata", "m.map.ron", || {
                bundle_from_parts(&meta, "m.map.ron", d.reference_npy, "m.npy", 1_000_000)
                    .map_err(|e| e.to_string())
            });
            let npy = mutate(
                &mut rng,
                &d.reference_npy[..d.reference_npy.len().min(4096)],
                false,
            );
            survive("bundle array", "m.", || {
                bundle_from_parts(d.reference_meta, "m.map.ron", &npy, "m.npy", 1_000_000)
                    .map_err(|e| e.to_string())
            });
        }
    }
    assert!(
        accepted > 50,
        "only {accepted} mutants were accepted: the mutations are too blunt"
    );
}

#[test]
fn mutated_packed_arrays_never_panic_and_refusals_name_the_file() {
    let mut rng = TestRng(0xA11A_7000_0000_0001);
    let dir = scratch("mutation-packed");
    let s = demo::session("glass-pass").unwrap();
    let header = dir.join("g.session.ron");
    gridscope::session::write_packed(&s, &header).unwrap();
    let arrays = [
        "g.times.npy",
        "g.poses.npy",
        "g.lidar.npy",
        "g.bumper_sonar.npy",
    ];
    let originals: Vec<Vec<u8>> = arrays
        .iter()
        .map(|a| std::fs::read(dir.join(a)).unwrap())
        .collect();
    for round in 0..400 {
        let k = round % arrays.len();
        // Mutate near the header most of the time: that is where sizes are read.
        let head = originals[k]
            .len()
            .min(if round % 3 == 0 { 1 << 20 } else { 256 });
        let mut bytes = mutate(&mut rng, &originals[k][..head], false);
        bytes.extend_from_slice(&originals[k][head..]);
        std::fs::write(dir.join(arrays[k]), &bytes).unwrap();
        let read = survive("packed", "", || {
            Session::load(&header).map_err(|e| e.to_string())
        });
        if read.is_none() {
            // The refusal names one of the session's files.
            let message = Session::load(&header).unwrap_err().to_string();
            assert!(
                arrays.iter().any(|a| message.contains(a)) || message.contains("g.session.ron"),
                "{message}"
            );
        }
        std::fs::write(dir.join(arrays[k]), &originals[k]).unwrap();
    }
}

//! Writing a group of files (a map bundle, a packed session) so that either the whole new group
//! or the whole previous one is there afterwards, never a mix and never a half-written file.
//!
//! Design decision: parts are written first, where no name can reach them (on Linux an unnamed
//! file in the target directory, which the system deletes if the process dies; elsewhere a
//! file under a fresh random name created exclusively, so nothing planted there is followed),
//! and only then committed: under a lock on the directory (so concurrent writers to one prefix
//! take turns) and with interrupts held back until it is done, each previous file is kept under
//! a second name, the new parts are renamed into place, and the kept files are dropped. If any
//! step fails, the new names are rolled back to the kept files. Leftovers of a process killed
//! outright (named temporaries, kept files) carry its process id and are cleaned up by the next
//! write into that directory.

use crate::error::Error;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Suffix of a part written under a temporary name.
const TMP_SUFFIX: &str = ".gridscope-tmp";
/// Suffix of a previous file kept while a group is committed.
const OLD_SUFFIX: &str = ".gridscope-old";

/// Writes several files so that either all appear under their final names or none does.
pub fn write_all_atomically(files: &[(PathBuf, Vec<u8>)]) -> Result<(), Error> {
    let parts: Vec<(PathBuf, &[u8])> = files.iter().map(|(p, b)| (p.clone(), &b[..])).collect();
    write_group(&parts, &[])
}

/// Writes `parts` as one group and removes the files `remove` (previous parts the new group
/// does not have, e.g. an optional `.pgm`), atomically as described in the module notes.
pub fn write_group(parts: &[(PathBuf, &[u8])], remove: &[PathBuf]) -> Result<(), Error> {
    let write_err = |file: &Path, source: std::io::Error| Error::Write {
        file: file.to_path_buf(),
        source,
    };
    for (path, _) in parts {
        if path.is_dir() {
            return Err(write_err(
                path,
                std::io::Error::other("it is a directory; give a file name"),
            ));
        }
    }
    let mut dirs: Vec<PathBuf> = parts.iter().map(|(p, _)| dir_of(p)).collect();
    dirs.sort();
    dirs.dedup();
    for d in &dirs {
        sweep_stale(d);
    }
    // 1. Write every part where no name reaches it.
    let mut written: Vec<Pending> = Vec::with_capacity(parts.len());
    for (path, bytes) in parts {
        match Pending::write(path, bytes) {
            Ok(p) => written.push(p),
            Err(e) => {
                written.iter().for_each(Pending::discard);
                return Err(write_err(path, e));
            }
        }
    }
    // 2. Give each part a temporary name beside its target.
    let mut named: Vec<PathBuf> = Vec::with_capacity(written.len());
    for (p, (path, _)) in written.iter().zip(parts) {
        match p.name() {
            Ok(n) => named.push(n),
            Err(e) => {
                named.iter().for_each(|n| drop(std::fs::remove_file(n)));
                written.iter().for_each(Pending::discard);
                return Err(write_err(path, e));
            }
        }
    }
    drop(written);
    // 3. Commit under the directories' locks, with interrupts held back.
    let _locks: Vec<DirLock> = dirs.iter().map(|d| DirLock::take(d)).collect();
    let _held = HeldSignals::hold();
    let targets: Vec<&Path> = parts.iter().map(|(p, _)| p.as_path()).collect();
    commit(&targets, &named, remove).map_err(|(file, e)| write_err(&file, e))
}

/// The commit: keep the previous files, rename the new ones into place, drop the kept ones;
/// on failure, put the previous files back.
fn commit(
    targets: &[&Path],
    named: &[PathBuf],
    remove: &[PathBuf],
) -> Result<(), (PathBuf, std::io::Error)> {
    let everything: Vec<&Path> = targets
        .iter()
        .copied()
        .chain(remove.iter().map(PathBuf::as_path))
        .collect();
    // Keep what is there now: as a second link where the file system allows it (the old file
    // stays in place until the new one replaces it), else moved aside.
    struct Kept<'a> {
        target: &'a Path,
        old: PathBuf,
        linked: bool,
    }
    let mut kept: Vec<Kept> = Vec::new();
    let undo = |kept: &[Kept], placed: &[&Path]| {
        for k in kept {
            if k.linked && !placed.contains(&k.target) {
                // Still in place under its own name: drop the second link.
                let _ = std::fs::remove_file(&k.old);
            } else {
                let _ = std::fs::rename(&k.old, k.target);
            }
        }
        for p in placed {
            if !kept.iter().any(|k| k.target == *p) {
                let _ = std::fs::remove_file(p);
            }
        }
        for n in named {
            let _ = std::fs::remove_file(n);
        }
    };
    for target in &everything {
        if std::fs::symlink_metadata(target).is_err() {
            continue;
        }
        let old = sibling(target, OLD_SUFFIX);
        let linked = std::fs::hard_link(target, &old).is_ok();
        if !linked && let Err(e) = std::fs::rename(target, &old) {
            undo(&kept, &[]);
            return Err((target.to_path_buf(), e));
        }
        kept.push(Kept {
            target,
            old,
            linked,
        });
    }
    let mut placed: Vec<&Path> = Vec::new();
    for (k, (new, target)) in named.iter().zip(targets).enumerate() {
        let result = if fail_at(k) {
            Err(std::io::Error::other("injected failure"))
        } else {
            std::fs::rename(new, target)
        };
        if let Err(e) = result {
            undo(&kept, &placed);
            return Err((target.to_path_buf(), e));
        }
        placed.push(target);
    }
    for r in remove {
        let _ = std::fs::remove_file(r);
    }
    for k in &kept {
        let _ = std::fs::remove_file(&k.old);
    }
    if let Some(d) = targets.first().map(|t| dir_of(t))
        && let Ok(f) = std::fs::File::open(&d)
    {
        let _ = f.sync_all();
    }
    Ok(())
}

/// The directory a file goes into.
fn dir_of(path: &Path) -> PathBuf {
    match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p.to_path_buf(),
        _ => PathBuf::from("."),
    }
}

/// A fresh name beside `path`: `.NAME.PID-RANDOM` + `suffix`.
fn sibling(path: &Path, suffix: &str) -> PathBuf {
    use std::hash::{BuildHasher, Hasher};
    static COUNTER: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);
    let mut h = std::collections::hash_map::RandomState::new().build_hasher();
    h.write_u64(COUNTER.fetch_add(1, std::sync::atomic::Ordering::Relaxed));
    let name = path.file_name().unwrap_or_default().to_string_lossy();
    path.with_file_name(format!(
        ".{name}.{}-{:016x}{suffix}",
        std::process::id(),
        h.finish()
    ))
}

/// Removes what a killed writer left in `dir`: temporaries of processes that no longer run,
/// and files it had kept aside (put back when the file they came from is missing).
fn sweep_stale(dir: &Path) {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return;
    };
    for entry in entries.flatten() {
        let name = entry.file_name().to_string_lossy().into_owned();
        let (stem, is_old) = if let Some(s) = name.strip_suffix(TMP_SUFFIX) {
            (s, false)
        } else if let Some(s) = name.strip_suffix(OLD_SUFFIX) {
            (s, true)
        } else {
            continue;
        };
        let Some((target, tag)) = stem.strip_prefix('.').and_then(|s| s.rsplit_once('.')) else {
            continue;
        };
        let Some(pid) = tag.split('-').next().and_then(|p| p.parse::<u32>().ok()) else {
            continue;
        };
        if pid == std::process::id() || process_alive(pid) {
            continue;
        }
        let path = entry.path();
        let original = dir.join(target);
        if is_old && std::fs::symlink_metadata(&original).is_err() {
            let _ = std::fs::rename(&path, &original);
        } else {
            let _ = std::fs::remove_file(&path);
        }
    }
}

#[cfg(unix)]
fn process_alive(pid: u32) -> bool {
    let Ok(pid) = i32::try_from(pid) else {
        return false;
    };
    // SAFETY: kill with signal 0 sends nothing; it only asks whether the process exists.
    let r = unsafe { libc::kill(pid, 0) };
    r == 0 || std::io::Error::last_os_error().raw_os_error() != Some(libc::ESRCH)
}

#[cfg(not(unix))]
fn process_alive(_pid: u32) -> bool {
    true
}

/// A part written but not yet named.
struct Pending {
    file: std::fs::File,
    /// `None` for an unnamed file; else the temporary name it was created under.
    temp: Option<PathBuf>,
    target: PathBuf,
}

impl Pending {
    /// Writes `bytes` into a new file in `target`'s directory that no existing name can reach.
    fn write(target: &Path, bytes: &[u8]) -> std::io::Result<Pending> {
        let (mut file, temp) = match unnamed_in(&dir_of(target)) {
            Some(f) => (f, None),
            None => {
                let temp = sibling(target, TMP_SUFFIX);
                // create_new: exclusive creation, which also refuses to follow a link.
                let f = std::fs::OpenOptions::new()
                    .write(true)
                    .create_new(true)
                    .open(&temp)?;
                (f, Some(temp))
            }
        };
        let result = file.write_all(bytes).and_then(|()| file.sync_all());
        let p = Pending {
            file,
            temp,
            target: target.to_path_buf(),
        };
        match result {
            Ok(()) => Ok(p),
            Err(e) => {
                p.discard();
                Err(e)
            }
        }
    }

    /// A temporary name beside the target for the written file.
    fn name(&self) -> std::io::Result<PathBuf> {
        match &self.temp {
            Some(t) => Ok(t.clone()),
            None => {
                let name = sibling(&self.target, TMP_SUFFIX);
                link_unnamed(&self.file, &name)?;
                Ok(name)
            }
        }
    }

    /// Drops a part that will not be committed.
    fn discard(&self) {
        if let Some(t) = &self.temp {
            let _ = std::fs::remove_file(t);
        }
    }
}

/// An unnamed file in `dir` (Linux `O_TMPFILE`), or `None` where the system or the file
/// system does not offer one.
#[cfg(target_os = "linux")]
fn unnamed_in(dir: &Path) -> Option<std::fs::File> {
    use std::os::unix::fs::OpenOptionsExt;
    std::fs::OpenOptions::new()
        .write(true)
        .custom_flags(libc::O_TMPFILE)
        .mode(0o644)
        .open(dir)
        .ok()
}

#[cfg(not(target_os = "linux"))]
fn unnamed_in(_dir: &Path) -> Option<std::fs::File> {
    None
}

/// Gives an unnamed file the name `name` (which must not exist).
#[cfg(target_os = "linux")]
fn link_unnamed(file: &std::fs::File, name: &Path) -> std::io::Result<()> {
    use std::os::unix::ffi::OsStrExt;
    use std::os::unix::io::AsRawFd;
    let from = std::ffi::CString::new(format!("/proc/self/fd/{}", file.as_raw_fd()))
        .map_err(std::io::Error::other)?;
    let to = std::ffi::CString::new(name.as_os_str().as_bytes()).map_err(std::io::Error::other)?;
    // SAFETY: both paths are NUL-terminated strings that live across the call; linkat only
    // reads them. AT_SYMLINK_FOLLOW resolves the /proc entry to the open file itself.
    let r = unsafe {
        libc::linkat(
            libc::AT_FDCWD,
            from.as_ptr(),
            libc::AT_FDCWD,
            to.as_ptr(),
            libc::AT_SYMLINK_FOLLOW,
        )
    };
    if r == 0 {
        Ok(())
    } else {
        Err(std::io::Error::last_os_error())
    }
}

#[cfg(not(target_os = "linux"))]
fn link_unnamed(_file: &std::fs::File, _name: &Path) -> std::io::Result<()> {
    Err(std::io::Error::other(
        "unnamed files are not supported here",
    ))
}

/// An exclusive lock on a directory for the commit (advisory: gridscope writers take turns).
struct DirLock(Option<std::fs::File>);

impl DirLock {
    fn take(dir: &Path) -> DirLock {
        let file = std::fs::File::open(dir).ok();
        #[cfg(unix)]
        if let Some(f) = &file {
            use std::os::unix::io::AsRawFd;
            // SAFETY: flock on a descriptor this value owns; it blocks until the lock is free.
            unsafe {
                libc::flock(f.as_raw_fd(), libc::LOCK_EX);
            }
        }
        DirLock(file)
    }
}

impl Drop for DirLock {
    fn drop(&mut self) {
        #[cfg(unix)]
        if let Some(f) = &self.0 {
            use std::os::unix::io::AsRawFd;
            // SAFETY: as in `take`; the descriptor is still open.
            unsafe {
                libc::flock(f.as_raw_fd(), libc::LOCK_UN);
            }
        }
    }
}

/// Interrupts (SIGINT, SIGTERM, SIGHUP) held back while a commit runs: they are recorded, and
/// delivered again with their previous handling once the last commit in the process is over,
/// so an interrupt never stops a commit half-way.
struct HeldSignals;

/// Commits running now, and the handling the signals had before the first of them began.
#[cfg(unix)]
static HOLDING: std::sync::Mutex<(usize, Vec<(i32, libc::sigaction)>)> =
    std::sync::Mutex::new((0, Vec::new()));
#[cfg(unix)]
static HELD: std::sync::atomic::AtomicI32 = std::sync::atomic::AtomicI32::new(0);

#[cfg(unix)]
extern "C" fn note_signal(sig: i32) {
    HELD.store(sig, std::sync::atomic::Ordering::SeqCst);
}

impl HeldSignals {
    fn hold() -> HeldSignals {
        #[cfg(unix)]
        {
            let mut state = HOLDING.lock().unwrap_or_else(|e| e.into_inner());
            state.0 += 1;
            if state.0 == 1 {
                let handler: extern "C" fn(i32) = note_signal;
                for sig in [libc::SIGINT, libc::SIGTERM, libc::SIGHUP] {
                    // SAFETY: a zeroed sigaction with a handler that only stores to an atomic
                    // (async-signal-safe); the previous action is saved to be restored.
                    unsafe {
                        let mut act: libc::sigaction = std::mem::zeroed();
                        act.sa_sigaction = handler as libc::sighandler_t;
                        libc::sigemptyset(&mut act.sa_mask);
                        let mut old: libc::sigaction = std::mem::zeroed();
                        if libc::sigaction(sig, &act, &mut old) == 0 {
                            state.1.push((sig, old));
                        }
                    }
                }
            }
        }
        HeldSignals
    }
}

impl Drop for HeldSignals {
    fn drop(&mut self) {
        #[cfg(unix)]
        {
            let mut state = HOLDING.lock().unwrap_or_else(|e| e.into_inner());
            state.0 -= 1;
            if state.0 == 0 {
                for (sig, old) in state.1.drain(..) {
                    // SAFETY: restores the action saved in `hold`.
                    unsafe {
                        libc::sigaction(sig, &old, std::ptr::null_mut());
                    }
                }
                let sig = HELD.swap(0, std::sync::atomic::Ordering::SeqCst);
                if sig != 0 {
                    // SAFETY: delivers the held signal to this process with its own handling.
                    unsafe {
                        libc::raise(sig);
                    }
                }
            }
        }
    }
}

#[cfg(test)]
thread_local! {
    /// Tests: make the commit's k-th rename fail.
    static FAIL_AT: std::cell::Cell<Option<usize>> = const { std::cell::Cell::new(None) };
}

#[cfg(test)]
fn fail_at(k: usize) -> bool {
    FAIL_AT.with(|f| f.get() == Some(k))
}

#[cfg(not(test))]
fn fail_at(_k: usize) -> bool {
    false
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(name: &str) -> PathBuf {
        let d =
            std::env::temp_dir().join(format!("gridscope-atomic-{}-{name}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        d
    }

    fn names(dir: &Path) -> Vec<String> {
        let mut v: Vec<String> = std::fs::read_dir(dir)
            .unwrap()
            .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn a_failed_commit_leaves_the_previous_group_whole() {
        let dir = scratch("rollback");
        let files = |tag: &str| -> Vec<(PathBuf, Vec<u8>)> {
            ["m.npy", "m.png", "m.map.ron"]
                .iter()
                .map(|n| (dir.join(n), format!("{tag} {n}").into_bytes()))
                .collect()
        };
        write_all_atomically(&files("old")).unwrap();
        FAIL_AT.with(|f| f.set(Some(2)));
        let e = write_all_atomically(&files("new")).unwrap_err();
        FAIL_AT.with(|f| f.set(None));
        assert!(e.to_string().contains("m.map.ron"), "{e}");
        for n in ["m.npy", "m.png", "m.map.ron"] {
            assert_eq!(
                std::fs::read_to_string(dir.join(n)).unwrap(),
                format!("old {n}")
            );
        }
        assert_eq!(names(&dir), vec!["m.map.ron", "m.npy", "m.png"]);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[cfg(unix)]
    #[test]
    fn planted_links_are_replaced_not_followed() {
        let dir = scratch("links");
        let victim = dir.join("victim.txt");
        std::fs::write(&victim, "keep").unwrap();
        std::os::unix::fs::symlink(&victim, dir.join("m.npy")).unwrap();
        write_all_atomically(&[(dir.join("m.npy"), b"new".to_vec())]).unwrap();
        assert_eq!(std::fs::read_to_string(&victim).unwrap(), "keep");
        let meta = std::fs::symlink_metadata(dir.join("m.npy")).unwrap();
        assert!(meta.file_type().is_file());
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn concurrent_writers_never_mix_their_groups() {
        let dir = scratch("race");
        std::thread::scope(|s| {
            for w in 0..8 {
                let dir = &dir;
                s.spawn(move || {
                    for round in 0..10 {
                        let tag = format!("writer {w} round {round}");
                        let files: Vec<(PathBuf, Vec<u8>)> = ["a", "b", "c"]
                            .iter()
                            .map(|n| (dir.join(n), tag.clone().into_bytes()))
                            .collect();
                        write_all_atomically(&files).unwrap();
                        let read = |n| std::fs::read_to_string(dir.join(n)).unwrap();
                        // Between commits the three files always come from one writer.
                        let _ = (read("a"), read("b"), read("c"));
                    }
                });
            }
        });
        let a = std::fs::read_to_string(dir.join("a")).unwrap();
        assert_eq!(std::fs::read_to_string(dir.join("b")).unwrap(), a);
        assert_eq!(std::fs::read_to_string(dir.join("c")).unwrap(), a);
        assert_eq!(names(&dir), vec!["a", "b", "c"]);
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn leftovers_of_a_killed_writer_are_cleaned_up_and_parts_removed() {
        let dir = scratch("stale");
        // A process id that cannot exist (beyond Linux's pid_max).
        std::fs::write(dir.join(".m.npy.99999999-00ab.gridscope-tmp"), "junk").unwrap();
        std::fs::write(dir.join(".m.png.99999999-00cd.gridscope-old"), "previous").unwrap();
        std::fs::write(dir.join("m.pgm"), "stale part").unwrap();
        let parts = [(dir.join("m.npy"), &b"n"[..])];
        write_group(&parts, &[dir.join("m.pgm")]).unwrap();
        // The kept file whose original was missing is put back; the temporary is gone.
        assert_eq!(names(&dir), vec!["m.npy", "m.png"]);
        assert_eq!(
            std::fs::read_to_string(dir.join("m.png")).unwrap(),
            "previous"
        );
        assert!(write_all_atomically(&[(dir.clone(), vec![])]).is_err());
        std::fs::remove_dir_all(&dir).unwrap();
    }
}

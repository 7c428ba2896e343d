//! Reading input files whole, within a size limit, and only when they are regular files.
//!
//! Design decision: every reader asks for the file's kind and size before it reads a byte, so a
//! device (`/dev/zero`), a pipe or a file larger than the caller can hold is refused with a
//! message instead of exhausting memory. The limit is the caller's: it knows what it can hold.

use crate::error::{InputError, Problem};
use std::io::Read;
use std::path::Path;

/// Largest text document read whole (an inline session, a profile, a plan, bundle metadata),
/// bytes. Longer runs belong in the packed layout, whose arrays are memory-mapped.
pub const MAX_TEXT_BYTES: u64 = 1 << 30;

/// Opens `path` for reading after checking that it is a regular file of at most `limit` bytes;
/// returns the file and its length.
pub(crate) fn open_limited(path: &Path, limit: u64) -> Result<(std::fs::File, u64), InputError> {
    let file = std::fs::File::open(path).map_err(|e| InputError::at(path, Problem::Read(e)))?;
    let meta = file
        .metadata()
        .map_err(|e| InputError::at(path, Problem::Read(e)))?;
    if !meta.is_file() {
        return Err(InputError::at(
            path,
            Problem::Malformed(
                "not a regular file (a directory, device or pipe cannot be read as input)".into(),
            ),
        ));
    }
    if meta.len() > limit {
        return Err(InputError::at(
            path,
            Problem::TooLarge {
                what: "the file",
                size: meta.len(),
                limit,
            },
        ));
    }
    Ok((file, meta.len()))
}

/// Reads a regular file of at most `limit` bytes whole.
pub(crate) fn read_limited(path: &Path, limit: u64) -> Result<Vec<u8>, InputError> {
    let (file, len) = open_limited(path, limit)?;
    let mut bytes = Vec::new();
    bytes
        .try_reserve_exact(len as usize)
        .map_err(|_| InputError::at(path, Problem::Read(std::io::Error::other("out of memory"))))?;
    // `take` guards against a file that grows while it is read.
    file.take(limit + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| InputError::at(path, Problem::Read(e)))?;
    if bytes.len() as u64 > limit {
        return Err(InputError::at(
            path,
            Problem::TooLarge {
                what: "the file",
                size: bytes.len() as u64,
                limit,
            },
        ));
    }
    Ok(bytes)
}

/// Reads a whole text document (at most [`MAX_TEXT_BYTES`]), naming the line and column of
/// the first byte that is not UTF-8.
pub(crate) fn read_text(path: &Path) -> Result<String, InputError> {
    let bytes = read_limited(path, MAX_TEXT_BYTES)?;
    String::from_utf8(bytes).map_err(|e| {
        let upto = &e.as_bytes()[..e.utf8_error().valid_up_to()];
        let line = upto.iter().filter(|&&b| b == b'\n').count() + 1;
        let col = upto.iter().rev().take_while(|&&b| b != b'\n').count() + 1;
        InputError::at(
            path,
            Problem::Syntax {
                line,
                col,
                message: "the file is not UTF-8 text".into(),
            },
        )
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn special_files_and_oversized_files_are_refused_before_reading() {
        // A device that never ends: refused by kind, not read.
        #[cfg(unix)]
        {
            let e = read_limited(Path::new("/dev/zero"), 1 << 20).unwrap_err();
            assert!(e.to_string().contains("not a regular file"), "{e}");
        }
        let dir = std::env::temp_dir().join(format!("gridscope-read-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let e = read_limited(&dir, 1 << 20).unwrap_err();
        assert!(e.to_string().contains("not a regular file"), "{e}");
        let f = dir.join("big.txt");
        std::fs::write(&f, vec![b'x'; 100]).unwrap();
        let e = read_limited(&f, 99).unwrap_err();
        assert!(
            matches!(e.problem, Problem::TooLarge { size: 100, .. }),
            "{e}"
        );
        assert_eq!(read_limited(&f, 100).unwrap().len(), 100);
        std::fs::write(&f, b"ok\n\xff").unwrap();
        let e = read_text(&f).unwrap_err();
        assert!(
            matches!(
                e.problem,
                Problem::Syntax {
                    line: 2,
                    col: 1,
                    ..
                }
            ),
            "{e}"
        );
        std::fs::remove_dir_all(&dir).unwrap();
    }
}

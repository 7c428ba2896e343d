//! NumPy `.npy` arrays (format versions 1.0 to 3.0): headers written and read, and the
//! little-endian float arrays gridscope exchanges.
//!
//! Design decision: a header is untrusted input. It must be ASCII, its shape is multiplied
//! out with checked arithmetic, and the payload's length must equal what the shape and the
//! element type ask for exactly, before any caller sizes a buffer or a slice from it.

/// Most dimensions an array may have (NumPy's own limit).
const MAX_DIMS: usize = 64;

/// A parsed `.npy` header: element type, order, shape and where the data starts.
#[derive(Clone, Debug, PartialEq)]
pub struct NpyHeader {
    /// The `descr` string, e.g. `<f4`.
    pub descr: String,
    /// Whether the data is column-major.
    pub fortran_order: bool,
    /// The array shape.
    pub shape: Vec<usize>,
    /// Byte offset of the data.
    pub data_offset: usize,
}

impl NpyHeader {
    /// Number of elements, or an error when the shape's product overflows.
    pub fn elements(&self) -> Result<usize, String> {
        self.shape
            .iter()
            .try_fold(1usize, |n, &d| n.checked_mul(d))
            .ok_or_else(|| format!("shape {:?} is too large to hold", self.shape))
    }

    /// Checks that a file of `file_len` bytes holds exactly the data the shape asks for, with
    /// elements of `size` bytes; returns the element count.
    pub fn check_payload(&self, file_len: usize, size: usize) -> Result<usize, String> {
        let n = self.elements()?;
        let need = n
            .checked_mul(size)
            .and_then(|b| b.checked_add(self.data_offset))
            .ok_or_else(|| format!("shape {:?} is too large to hold", self.shape))?;
        if file_len != need {
            return Err(format!(
                "{} bytes of data, but shape {:?} of {} needs {}",
                file_len.saturating_sub(self.data_offset),
                self.shape,
                self.descr,
                need - self.data_offset
            ));
        }
        Ok(n)
    }

    /// Refuses column-major data.
    pub fn require_c_order(&self) -> Result<(), String> {
        if self.fortran_order {
            Err("the array must be in C order (fortran_order False)".into())
        } else {
            Ok(())
        }
    }
}

/// The header of a NumPy version 1.0 file of C-ordered `descr` elements with `shape`, padded
/// so that the data that follows starts on a 64-byte boundary.
pub fn header(descr: &str, shape: &[usize]) -> Vec<u8> {
    let dims: Vec<String> = shape.iter().map(|d| d.to_string()).collect();
    let shape_text = if shape.len() == 1 {
        format!("({},)", dims[0])
    } else {
        format!("({})", dims.join(", "))
    };
    let dict = format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape_text}, }}");
    // Magic (6) + version (2) + header length (2) + dict + padding + '\n' is a multiple of 64.
    let unpadded = 10 + dict.len() + 1;
    let pad = (64 - unpadded % 64) % 64;
    let header_len = dict.len() + pad + 1;
    let mut out = Vec::with_capacity(10 + header_len);
    out.extend_from_slice(b"\x93NUMPY\x01\x00");
    out.extend_from_slice(&(header_len as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out.extend(std::iter::repeat_n(b' ', pad));
    out.push(b'\n');
    out
}

/// Parses a `.npy` header (format versions 1.0, 2.0 and 3.0).
pub fn parse_header(bytes: &[u8]) -> Result<NpyHeader, String> {
    if bytes.len() < 10 || &bytes[..6] != b"\x93NUMPY" {
        return Err("not a NumPy .npy file (bad magic)".into());
    }
    let (len, start): (usize, usize) = match bytes[6] {
        1 => (u16::from_le_bytes([bytes[8], bytes[9]]) as usize, 10),
        2 | 3 => {
            let b = bytes.get(8..12).ok_or("truncated .npy header")?;
            (u32::from_le_bytes([b[0], b[1], b[2], b[3]]) as usize, 12)
        }
        v => return Err(format!(".npy format version {v} is not supported")),
    };
    let end = start.checked_add(len).ok_or("truncated .npy header")?;
    let raw = bytes.get(start..end).ok_or("truncated .npy header")?;
    if !raw.is_ascii() {
        return Err("the .npy header is not ASCII text".into());
    }
    let header = std::str::from_utf8(raw).map_err(|_| "the .npy header is not ASCII text")?;
    let value_after = |key: &str| -> Result<&str, String> {
        let quoted = [format!("'{key}'"), format!("\"{key}\"")];
        let (k, q) = quoted
            .iter()
            .find_map(|q| header.find(q.as_str()).map(|k| (k, q.len())))
            .ok_or(format!(".npy header has no '{key}'"))?;
        let rest = &header[k + q..];
        let colon = rest
            .find(':')
            .ok_or(format!(".npy header: no value for '{key}'"))?;
        Ok(rest[colon + 1..].trim_start())
    };
    let descr_v = value_after("descr")?;
    let q = descr_v
        .chars()
        .next()
        .filter(|c| *c == '\'' || *c == '"')
        .ok_or(".npy header: descr is not a quoted string")?;
    let descr_end = descr_v[1..]
        .find(q)
        .ok_or(".npy header: unterminated descr")?;
    let descr = descr_v[1..1 + descr_end].to_string();
    let fortran_order = value_after("fortran_order")?.starts_with("True");
    let shape_v = value_after("shape")?;
    if !shape_v.starts_with('(') {
        return Err(".npy header: shape is not a tuple".into());
    }
    let close = shape_v.find(')').ok_or(".npy header: unterminated shape")?;
    let shape = shape_v[1..close]
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| {
            s.parse::<usize>()
                .map_err(|_| format!(".npy header: bad dimension {s:?}"))
        })
        .collect::<Result<Vec<_>, _>>()?;
    if shape.len() > MAX_DIMS {
        return Err(format!(
            ".npy header: {} dimensions (at most {MAX_DIMS})",
            shape.len()
        ));
    }
    Ok(NpyHeader {
        descr,
        fortran_order,
        shape,
        data_offset: end,
    })
}

/// Element size of the float types gridscope reads: `<f4` or `<f8`.
fn float_size(descr: &str) -> Result<usize, String> {
    match descr {
        "<f4" => Ok(4),
        "<f8" => Ok(8),
        d => Err(format!(
            "element type {d:?} is not supported (use '<f4' or '<f8')"
        )),
    }
}

/// Reads the elements of a little-endian float array of either width as f64, after checking
/// the payload's length; returns the header and the values (in storage order).
pub fn read_floats(bytes: &[u8]) -> Result<(NpyHeader, Vec<f64>), String> {
    let h = parse_header(bytes)?;
    let size = float_size(&h.descr)?;
    h.check_payload(bytes.len(), size)?;
    let data = &bytes[h.data_offset..];
    let values = if size == 4 {
        data.chunks_exact(4)
            .map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]]) as f64)
            .collect()
    } else {
        data.chunks_exact(8)
            .map(|c| f64::from_le_bytes(c.try_into().expect("chunks of 8")))
            .collect()
    };
    Ok((h, values))
}

/// Reads a 2-D array of float32 or float64 (little-endian, either order) into row-major f32,
/// returning (rows, cols, values).
pub fn read_2d_f32(bytes: &[u8]) -> Result<(usize, usize, Vec<f32>), String> {
    let (h, flat) = read_floats(bytes)?;
    let [rows, cols] = h.shape[..] else {
        return Err(format!("expected a 2-D array, found shape {:?}", h.shape));
    };
    if !h.fortran_order {
        return Ok((rows, cols, flat.into_iter().map(|v| v as f32).collect()));
    }
    let mut out = vec![0.0f32; flat.len()];
    for r in 0..rows {
        for c in 0..cols {
            out[r * cols + c] = flat[c * rows + r] as f32;
        }
    }
    Ok((rows, cols, out))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn header_follows_the_numpy_format_specification() {
        // NumPy "A Simple File Format for NumPy Arrays" (NEP 1 / numpy.lib.format docs):
        // magic "\x93NUMPY", major 1, minor 0, little-endian u16 header length, an ASCII dict
        // literal padded with spaces and ended by '\n' so the data starts 64-byte aligned.
        let b = header("<f4", &[2, 3]);
        assert_eq!(&b[..6], b"\x93NUMPY");
        assert_eq!((b[6], b[7]), (1, 0));
        let hl = u16::from_le_bytes([b[8], b[9]]) as usize;
        assert_eq!((10 + hl) % 64, 0);
        let text = std::str::from_utf8(&b[10..10 + hl]).unwrap();
        assert!(text.starts_with("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }"));
        assert!(text.ends_with('\n'));
        let h = parse_header(&b).unwrap();
        assert_eq!((h.shape.clone(), h.data_offset), (vec![2, 3], 10 + hl));
        assert!(header("<f8", &[5])[10..].starts_with(b"{'descr': '<f8'"));
        assert!(String::from_utf8_lossy(&header("<f8", &[5])).contains("(5,)"));
    }

    #[test]
    fn hostile_headers_are_refused_without_panic() {
        // Non-ASCII bytes inside the dict.
        let mut b = header("<f4", &[1, 1]);
        b[12] = 0xC3;
        b[13] = 0xA9;
        b.extend_from_slice(&[0; 4]);
        assert!(parse_header(&b).unwrap_err().contains("ASCII"));
        // A shape whose byte count wraps around: 2^62 + 1 floats claimed, 4 bytes given.
        let mut b = header("<f4", &[(1 << 62) + 1]);
        b.extend_from_slice(&[0; 4]);
        assert!(read_floats(&b).is_err());
        let mut b = header("<f4", &[1 << 32, 1 << 32]);
        b.extend_from_slice(&[0; 4]);
        let e = read_floats(&b).unwrap_err();
        assert!(e.contains("too large"), "{e}");
        // Truncated, or a header length running past the end.
        assert!(parse_header(b"\x93NUMPY\x01\x00").is_err());
        assert!(parse_header(b"\x93NUMPY\x01\x00\xff\xff{").is_err());
        assert!(parse_header(b"\x93NUMPY\x02\x00\xff\xff\xff\xff{").is_err());
        // A descr that is not a string, a shape that is not a tuple.
        let bad = b"\x93NUMPY\x01\x00\x20\x00{'descr': 4, 'shape': 3,       }";
        assert!(parse_header(bad).is_err());
    }

    #[test]
    fn reads_both_orders_and_widths() {
        let mut b = header("<f8", &[2, 3]);
        for v in [1.0f64, 2.0, 3.0, 4.0, 5.0, 6.0] {
            b.extend_from_slice(&v.to_le_bytes());
        }
        assert_eq!(
            read_2d_f32(&b).unwrap(),
            (2, 3, vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
        );
        let mut f = b.clone();
        let at = f.windows(5).position(|w| w == b"False").unwrap();
        f[at..at + 5].copy_from_slice(b"True ");
        assert_eq!(
            read_2d_f32(&f).unwrap(),
            (2, 3, vec![1.0, 3.0, 5.0, 2.0, 4.0, 6.0])
        );
        b.pop();
        assert!(read_2d_f32(&b).unwrap_err().contains("needs"));
    }
}

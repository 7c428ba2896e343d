//! Numbers as text: the shortest form that reads back to the same value, in RON's spelling.
//!
//! Design decision: values computed as a multiple of a decimal step (a grid origin, k cells of
//! 0.05 m) are rounded to the step's own decimal places before they are stored, so files and
//! reports show `-82.85` rather than the product's rounding noise `-82.85000000000001`.

/// Shortest text of an f64 that RON reads back to the same bits (`inf`, `-inf`, `NaN` for the
/// non-finite values).
pub fn fmt_f64(v: f64) -> String {
    if v.is_finite() {
        format!("{v:?}")
    } else if v.is_nan() {
        "NaN".into()
    } else if v > 0.0 {
        "inf".into()
    } else {
        "-inf".into()
    }
}

/// Shortest text of an f32 that RON reads back to the same bits.
pub fn fmt_f32(v: f32) -> String {
    if v.is_finite() {
        format!("{v:?}")
    } else {
        fmt_f64(v as f64)
    }
}

/// A RON string literal.
pub fn ron_string(v: &str) -> String {
    ron::to_string(v).unwrap_or_else(|_| "\"\"".into())
}

/// `k * step` for a whole number `k`, rounded to the decimal places `step` is written with
/// (its shortest text), so that `-1657 * 0.05` is `-82.85` and not the binary product's
/// `-82.85000000000001`. A step without a short decimal form gives the plain product.
pub fn multiple_of(k: f64, step: f64) -> f64 {
    let product = k * step;
    let text = format!("{step}");
    let decimals = match text.split_once('.') {
        _ if text.contains(['e', 'E']) || !product.is_finite() => return product,
        Some((_, frac)) => frac.len(),
        None => 0,
    };
    if decimals > 12 {
        return product;
    }
    format!("{product:.decimals$}").parse().unwrap_or(product)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shortest_text_round_trips() {
        for v in [0.1f64, -82.85, 1e-300, 123456789.123, f64::MIN_POSITIVE] {
            assert_eq!(fmt_f64(v).parse::<f64>().unwrap().to_bits(), v.to_bits());
        }
        assert_eq!(fmt_f64(f64::INFINITY), "inf");
        assert_eq!(fmt_f32(f32::NEG_INFINITY), "-inf");
        assert_eq!(fmt_f32(f32::NAN), "NaN");
        assert_eq!(fmt_f32(4.99), "4.99");
        assert_eq!(ron_string("a \"b\""), "\"a \\\"b\\\"\"");
    }

    #[test]
    fn multiples_of_a_decimal_step_are_short() {
        // -1657 * 0.05 is -82.85000000000001 in binary floating point.
        assert_eq!(-1657.0 * 0.05, -82.85000000000001);
        assert_eq!(multiple_of(-1657.0, 0.05), -82.85);
        assert_eq!(multiple_of(3.0, 0.1), 0.3);
        assert_eq!(multiple_of(12.0, 2.5), 30.0);
        assert_eq!(multiple_of(-4.0, 0.025), -0.1);
        // A step with no short decimal form gives the product itself.
        assert_eq!(multiple_of(7.0, 1.0 / 3.0), 7.0 * (1.0 / 3.0));
        assert_eq!(multiple_of(5.0, 1e-20), 5.0 * 1e-20);
    }
}

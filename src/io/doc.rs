//! Versioned RON documents: parsing with gridscope's own error messages.
//!
//! Every document gridscope reads (sessions, profiles, plans, bundle metadata) carries
//! `format: 1`. Design decision: the parser's errors are translated into our words at the
//! place they occur (line and column), with a hint for the mistakes people make when they
//! convert data by hand or from Python (`nan`, `Infinity`, quoted field names, a missing
//! `format`), and never name the parser or the Rust types behind a document.

use crate::error::{InputError, Problem};
use ron::error::{Error as RonError, Position, SpannedError};
use serde::de::DeserializeOwned;

/// The one document format version this build reads.
pub const FORMAT: i64 = 1;

/// Parses `text` as a RON document of type `T`, naming `file` in every error. Optional fields
/// may be written bare (`extent: (...)`) or as `Some(...)`. A leading byte-order mark is
/// skipped. The caller checks `format` with [`check_format`] once the document is read.
pub(crate) fn parse<T: DeserializeOwned>(text: &str, file: &str) -> Result<T, InputError> {
    let text = text.strip_prefix('\u{feff}').unwrap_or(text);
    let options =
        ron::Options::default().with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME);
    options.from_str::<T>(text).map_err(|e| {
        // A document whose `format` names another version fails for that reason first.
        if let Some(found) = probe_format(text)
            && found != FORMAT
        {
            return InputError::new(file, Problem::UnknownFormat { found });
        }
        InputError::new(file, translate(&e, text))
    })
}

/// Refuses a document whose `format` is not the one this build reads.
pub(crate) fn check_format(found: i64, file: &str) -> Result<(), InputError> {
    if found == FORMAT {
        Ok(())
    } else {
        Err(InputError::new(file, Problem::UnknownFormat { found }))
    }
}

/// The value of a top-level `format: N` field, read leniently (other fields ignored).
fn probe_format(text: &str) -> Option<i64> {
    #[derive(serde::Deserialize)]
    struct Probe {
        format: i64,
    }
    ron::Options::default()
        .with_default_extension(ron::extensions::Extensions::IMPLICIT_SOME)
        .from_str::<Probe>(text)
        .ok()
        .map(|p| p.format)
}

/// The parser's error in our words, at its line and column.
fn translate(e: &SpannedError, text: &str) -> Problem {
    let at = |p: Position| (p.line.max(1), p.col.max(1));
    let (mut line, mut col) = at(e.span.start);
    let word = word_at(text, e.span.start);
    let message = match &e.code {
        RonError::MissingStructField { field, .. } => {
            if *field == "format" {
                // Reported at the end of the document by the parser; the fix goes at the top.
                (line, col) = (1, 1);
                "field `format` is missing: every gridscope document starts with `format: 1,`"
                    .to_string()
            } else {
                format!("field `{field}` is missing")
            }
        }
        RonError::NoSuchStructField {
            expected, found, ..
        } => format!(
            "unknown field `{found}`; the fields here are {}",
            one_of(expected)
        ),
        RonError::NoSuchEnumVariant {
            expected, found, ..
        } => format!("unknown choice `{found}`; expected {}", one_of(expected)),
        RonError::DuplicateStructField { field, .. } => format!("field `{field}` is given twice"),
        RonError::ExceededRecursionLimit => {
            "brackets are nested too deeply (more than 128 levels)".to_string()
        }
        RonError::InvalidValueForType { expected, found } => {
            format!("expected {expected}, found {found}")
        }
        RonError::ExpectedDifferentLength { expected, found } => {
            format!("expected {expected}, found {found} elements")
        }
        RonError::ExpectedFloat | RonError::ExpectedInteger => {
            let what = if matches!(e.code, RonError::ExpectedFloat) {
                "a number"
            } else {
                "a whole number"
            };
            match number_hint(&word) {
                Some(hint) => format!("expected {what}, found `{word}`: {hint}"),
                None if word.is_empty() => format!("expected {what}"),
                None => format!("expected {what}, found `{word}`"),
            }
        }
        RonError::ExpectedIdentifier | RonError::ExpectedNamedStructLike(_)
            if text_at(text, e.span.start).starts_with('"') =>
        {
            "expected a field name: field names are written without quotes, e.g. `format: 1`"
                .to_string()
        }
        RonError::ExpectedNamedStructLike(_) | RonError::ExpectedStructLike
            if text_at(text, e.span.start).starts_with('{') =>
        {
            "expected `(`: a gridscope document is a RON struct in parentheses, not a JSON \
             object in braces"
                .to_string()
        }
        RonError::ExpectedNamedStructLike(_) | RonError::ExpectedStructLike => {
            "expected `(` opening a group of fields".to_string()
        }
        RonError::ExpectedStructLikeEnd => "expected `)` closing a group of fields".to_string(),
        RonError::ExpectedArray => "expected `[` opening a list".to_string(),
        RonError::ExpectedArrayEnd => "expected `]` closing a list".to_string(),
        RonError::ExpectedMap => "expected `{` opening a map".to_string(),
        RonError::ExpectedMapEnd => "expected `}` closing a map".to_string(),
        RonError::ExpectedMapColon => "expected `:` after a map key".to_string(),
        RonError::ExpectedComma => "expected a comma".to_string(),
        RonError::ExpectedString | RonError::ExpectedStringEnd => {
            "expected a text in double quotes".to_string()
        }
        RonError::ExpectedBoolean => "expected true or false".to_string(),
        RonError::ExpectedIdentifier => "expected a field name".to_string(),
        RonError::Eof => "the document ends too early (is a bracket left open?)".to_string(),
        RonError::TrailingCharacters => "text after the end of the document".to_string(),
        RonError::UnexpectedChar(c) => format!("unexpected character {c:?}"),
        RonError::UnclosedBlockComment => "a /* comment is never closed".to_string(),
        RonError::Utf8Error(_) => "the text is not valid UTF-8".to_string(),
        RonError::Message(m) => m.clone(),
        other => lower_first(&other.to_string()),
    };
    Problem::Syntax { line, col, message }
}

/// What to write instead of a number spelled the way other tools spell it.
fn number_hint(word: &str) -> Option<&'static str> {
    match word.trim_start_matches(['-', '+']) {
        "nan" | "NAN" | "Nan" => Some("not-a-number is written `NaN`"),
        "Infinity" | "infinity" | "INF" | "Inf" | "inf" => {
            Some("infinity is written `inf` (or `-inf`)")
        }
        "null" | "None" | "none" => Some("every reading needs a number; a missing return is +inf"),
        "True" | "False" => Some("a number is needed here"),
        _ => None,
    }
}

/// `a`, `b` or `c`.
fn one_of(names: &[&str]) -> String {
    let quoted: Vec<String> = names.iter().map(|n| format!("`{n}`")).collect();
    match quoted.len() {
        0 => "none".to_string(),
        1 => quoted[0].clone(),
        n => format!("{} or {}", quoted[..n - 1].join(", "), quoted[n - 1]),
    }
}

fn lower_first(s: &str) -> String {
    let mut c = s.chars();
    match c.next() {
        Some(f) => f.to_lowercase().chain(c).collect(),
        None => String::new(),
    }
}

/// The text from a 1-based line and column on.
fn text_at(text: &str, p: Position) -> &str {
    let Some(line) = text.split('\n').nth(p.line.saturating_sub(1)) else {
        return "";
    };
    let start = line
        .char_indices()
        .nth(p.col.saturating_sub(1))
        .map_or(line.len(), |(i, _)| i);
    &line[start..]
}

/// The word (letters, digits, signs, dots) at a position, for hints.
fn word_at(text: &str, p: Position) -> String {
    text_at(text, p)
        .chars()
        .take_while(|c| c.is_alphanumeric() || matches!(c, '-' | '+' | '.' | '_'))
        .take(40)
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(serde::Deserialize, Debug)]
    #[serde(deny_unknown_fields)]
    struct Doc {
        format: i64,
        v: Vec<f32>,
        #[serde(default)]
        o: Option<u32>,
    }

    fn message(text: &str) -> (usize, usize, String) {
        match parse::<Doc>(text, "d.ron").unwrap_err().problem {
            Problem::Syntax { line, col, message } => (line, col, message),
            p => panic!("{p:?}"),
        }
    }

    #[test]
    fn conversion_mistakes_get_hints_at_their_place() {
        let (l, c, m) = message("(format: 1,\n v: [1.0, nan])");
        assert_eq!((l, c), (2, 11));
        assert!(m.contains("`NaN`"), "{m}");
        let (_, _, m) = message("(format: 1, v: [Infinity])");
        assert!(m.contains("`inf`"), "{m}");
        let (_, c, m) = message("(\"format\": 1, v: [])");
        assert_eq!(c, 2);
        assert!(m.contains("without quotes"), "{m}");
        let (_, _, m) = message("{\"format\": 1}");
        assert!(m.contains("not a JSON object"), "{m}");
        let (l, c, m) = message("(\n v: [],\n)");
        assert_eq!((l, c), (1, 1));
        assert!(m.contains("`format: 1,`"), "{m}");
        let (_, _, m) = message("(format: 1, v: [], q: 2)");
        assert!(m.contains("unknown field `q`") && !m.contains("Doc"), "{m}");
    }

    #[test]
    fn a_byte_order_mark_is_skipped_and_optional_fields_read_either_way() {
        let d: Doc = parse("\u{feff}(format: 1, v: [inf, -inf, NaN], o: 3)", "d").unwrap();
        assert!(d.v[0].is_infinite() && d.v[2].is_nan());
        assert_eq!(d.o, Some(3));
        let d: Doc = parse("(format: 1, v: [], o: Some(4))", "d").unwrap();
        assert_eq!((d.format, d.o), (1, Some(4)));
    }

    #[test]
    fn deep_nesting_and_other_versions_are_refused_in_our_words() {
        #[derive(serde::Deserialize, Debug)]
        #[allow(dead_code)]
        struct Nest {
            format: i64,
            inner: Vec<ron::Value>,
        }
        let deep = format!("(format: 1, inner: [{}])", "[".repeat(500));
        let e = parse::<Nest>(&deep, "deep.ron").unwrap_err().to_string();
        assert!(
            e.contains("nested too deeply") && !e.contains("serde"),
            "{e}"
        );
        let e = parse::<Doc>("(format: 3, v: [], extra: 1)", "d").unwrap_err();
        assert!(matches!(e.problem, Problem::UnknownFormat { found: 3 }));
    }
}

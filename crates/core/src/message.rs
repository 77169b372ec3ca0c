//! Messages for people: every error and note Sutura shows is one line of plain words, at most a
//! few hundred characters, whatever a damaged file puts into it.
//!
//! [`one_line`] is the one place that enforces it: control characters (newlines, tabs, escape
//! sequences a file may carry) become spaces, runs of spaces collapse, a number written out in
//! hundreds of digits (`1e-320` printed in full) is shown in scientific notation, and text
//! beyond the cap is cut at a character boundary with a mark saying how much went. Error constructors that
//! carry text derived from a file (`io`, `export`, `landmarks`) pass it through here, and the
//! command line passes its final message through it once more. [`quoted`] shows a value taken
//! from a file (a CSV cell, a JSON key) short and escaped.
//!
//! Imports nothing from the crate.

use std::fmt::Write as _;

/// The longest message, in characters, that a front end shows.
pub const MAX_MESSAGE_CHARS: usize = 400;

/// The longest part of a message that describes what is wrong inside one file.
pub const MAX_DETAIL_CHARS: usize = 240;

/// `text` on one line: control characters as spaces, whitespace runs collapsed, trimmed, and
/// cut to `max_chars` characters (the cut marked `… (N more characters)`).
#[must_use]
pub fn one_line(text: &str, max_chars: usize) -> String {
    let text = short_numbers(text);
    let mut out = String::with_capacity(text.len().min(max_chars * 4 + 32));
    let mut space = false;
    let mut kept = 0usize;
    let mut dropped = 0usize;
    for c in text.chars() {
        let c = if c.is_control() || c.is_whitespace() {
            ' '
        } else {
            c
        };
        if c == ' ' {
            if space || kept == 0 {
                continue;
            }
            space = true;
        } else {
            space = false;
        }
        if kept < max_chars {
            out.push(c);
            kept += 1;
        } else {
            dropped += 1;
        }
    }
    let trimmed = out.trim_end().len();
    out.truncate(trimmed);
    if dropped > 0 {
        let _ = write!(out, "… ({dropped} more characters)");
    }
    out
}

/// Numbers for a message, separated by commas: `1.5, 2, 0.75` (each in the shortest form that
/// reads back to it).
#[must_use]
pub fn numbers<T: std::fmt::Display>(values: &[T]) -> String {
    values
        .iter()
        .map(ToString::to_string)
        .collect::<Vec<_>>()
        .join(", ")
}

/// Numbers written out in more than [`LONG_NUMBER`] digits, in scientific notation.
const LONG_NUMBER: usize = 20;

fn short_numbers(text: &str) -> std::borrow::Cow<'_, str> {
    let is_num = |c: char| c.is_ascii_digit() || c == '.';
    let mut out = String::new();
    let mut last = 0;
    let mut chars = text.char_indices().peekable();
    while let Some((i, c)) = chars.next() {
        if !c.is_ascii_digit() {
            continue;
        }
        let mut end = i + 1;
        while let Some(&(j, d)) = chars.peek() {
            if !is_num(d) {
                break;
            }
            end = j + d.len_utf8();
            chars.next();
        }
        let start = if i > 0 && text[..i].ends_with('-') {
            i - 1
        } else {
            i
        };
        if end - start > LONG_NUMBER
            && let Ok(v) = text[start..end].parse::<f64>()
        {
            out.push_str(&text[last..start]);
            out.push_str(&number(v));
            last = end;
        }
    }
    if last == 0 {
        return std::borrow::Cow::Borrowed(text);
    }
    out.push_str(&text[last..]);
    std::borrow::Cow::Owned(out)
}

/// A number for a message: its shortest form that reads back to it, in scientific notation
/// outside 1e-6 ≤ |v| < 1e15 (so `1e-320` is not hundreds of zeros long).
#[must_use]
pub fn number(v: f64) -> String {
    if v == 0.0 || !v.is_finite() || (1e-6..1e15).contains(&v.abs()) {
        format!("{v}")
    } else {
        format!("{v:e}")
    }
}

/// A value from a file, for a message: in single quotes, control characters escaped, at most
/// 40 characters (longer ones cut with `…`).
#[must_use]
pub fn quoted(value: &str) -> String {
    const MAX: usize = 40;
    let mut out = String::from("'");
    for (n, c) in value.chars().enumerate() {
        if n == MAX {
            out.push('…');
            break;
        }
        if c.is_control() {
            out.extend(c.escape_default());
        } else {
            out.push(c);
        }
    }
    out.push('\'');
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_line_cleans_and_caps() {
        assert_eq!(one_line("  a\n\tb\r\n\x1b[31mc  ", 100), "a b [31mc");
        let long = "x".repeat(1000);
        let s = one_line(&long, 10);
        assert_eq!(s, "xxxxxxxxxx… (990 more characters)");
        // multi-byte characters are cut at a boundary
        let s = one_line(&"µ".repeat(20), 5);
        assert!(s.starts_with("µµµµµ…"), "{s}");
        assert_eq!(one_line("", 10), "");
        // numbers printed in full are shortened
        let zeros = format!("size {} mm", 1.6e-31);
        assert_eq!(one_line(&zeros, 100), "size 1.6e-31 mm");
        assert_eq!(
            one_line(&format!("{} is no count", -1e308), 100),
            "-1e308 is no count"
        );
        assert_eq!(one_line("line 12345 of 678", 100), "line 12345 of 678");
    }

    #[test]
    fn quoted_escapes_and_shortens() {
        assert_eq!(quoted("NaN"), "'NaN'");
        assert_eq!(quoted("a\nb"), "'a\\nb'");
        let q = quoted(&"y".repeat(100));
        assert_eq!(q.chars().count(), 43, "{q}");
    }
}

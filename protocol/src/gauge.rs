//! Line-output gauges: digital indicators that print one reading per line on a serial port.
//!
//! [`LineSplitter`] cuts a byte stream into lines at CR, LF or CRLF; it tolerates any noise (non-UTF-8
//! bytes, a line far too long) by discarding the bad line, and it never ends the stream.
//! [`parse_reading`] accepts only a strict number grammar — optional sign, digits with an optional
//! decimal point, an optional unit suffix `mm` or `in` — and converts to millimetres. No I/O here.

use std::collections::VecDeque;

/// Default longest line kept; real indicators print well under 40 characters.
pub const DEFAULT_MAX_LINE: usize = 64;
/// Lines kept for the caller before the oldest are dropped.
const MAX_PENDING_LINES: usize = 64;
/// Millimetres per inch, exact by definition (international inch, 1959).
pub const MM_PER_INCH: f64 = 25.4;

/// Splits bytes into lines. Bounded: it holds at most one line of `max_len` bytes plus pending lines.
#[derive(Debug)]
pub struct LineSplitter {
    buf: Vec<u8>,
    max_len: usize,
    overflowed: bool,
    lines: VecDeque<Vec<u8>>,
    discarded_lines: u64,
}

impl Default for LineSplitter {
    fn default() -> Self {
        Self::new(DEFAULT_MAX_LINE)
    }
}

impl LineSplitter {
    /// A splitter that discards lines longer than `max_len` bytes (at least 1).
    pub fn new(max_len: usize) -> Self {
        let max_len = max_len.max(1);
        LineSplitter {
            buf: Vec::with_capacity(max_len),
            max_len,
            overflowed: false,
            lines: VecDeque::new(),
            discarded_lines: 0,
        }
    }

    /// Feeds bytes read from the port.
    pub fn push(&mut self, bytes: &[u8]) {
        for &byte in bytes {
            if byte == b'\r' || byte == b'\n' {
                self.end_line();
            } else if self.overflowed {
                // Skip the rest of an over-long line.
            } else if self.buf.len() == self.max_len {
                self.overflowed = true;
                self.buf.clear();
            } else {
                self.buf.push(byte);
            }
        }
    }

    /// The next complete, non-empty line (without its terminator).
    pub fn next_line(&mut self) -> Option<Vec<u8>> {
        self.lines.pop_front()
    }

    /// Lines dropped: over-long ones, and any the caller did not collect in time.
    pub fn discarded_lines(&self) -> u64 {
        self.discarded_lines
    }

    /// Forgets a partial line (e.g. after reopening the port).
    pub fn reset(&mut self) {
        self.buf.clear();
        self.overflowed = false;
    }

    fn end_line(&mut self) {
        if self.overflowed {
            self.overflowed = false;
            self.discarded_lines += 1;
        } else if !self.buf.is_empty() {
            if self.lines.len() >= MAX_PENDING_LINES {
                self.lines.pop_front();
                self.discarded_lines += 1;
            }
            self.lines.push_back(std::mem::take(&mut self.buf));
        }
        self.buf.clear();
    }
}

/// Length units a gauge may print.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum LengthUnit {
    /// Millimetres.
    Mm,
    /// Inches.
    In,
}

impl LengthUnit {
    /// Millimetres per unit.
    pub fn to_mm(self) -> f64 {
        match self {
            LengthUnit::Mm => 1.0,
            LengthUnit::In => MM_PER_INCH,
        }
    }
}

/// Why a line is not a reading.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum GaugeError {
    /// Nothing but blanks.
    #[error("blank line")]
    Blank,
    /// A byte outside the grammar, at this position of the line.
    #[error("unexpected byte {byte:#04x} at column {column} (allowed: sign, digits, one decimal point, unit mm or in)")]
    Unexpected {
        /// The offending byte.
        byte: u8,
        /// 1-based position in the line.
        column: usize,
    },
    /// A sign or decimal point with no digits.
    #[error("no digits in the number")]
    NoDigits,
    /// Too many digits to be a gauge reading.
    #[error("number has {0} digits, at most 15 allowed")]
    TooLong(usize),
}

/// Parses one line as a reading in millimetres. `default_unit` applies when the line has no suffix.
///
/// Grammar (blanks allowed around the number and before the unit):
/// `[+|-] (digits [. digits*] | . digits) [mm|in]`, the unit in any letter case. No exponent, no thousands separator.
pub fn parse_reading(line: &[u8], default_unit: LengthUnit) -> Result<f64, GaugeError> {
    let is_blank = |b: &u8| *b == b' ' || *b == b'\t';
    let start = line.iter().position(|b| !is_blank(b)).ok_or(GaugeError::Blank)?;
    let end = line.iter().rposition(|b| !is_blank(b)).map_or(start, |i| i + 1);
    let text = &line[start..end];
    let column = |i: usize| start + i + 1;

    let mut i = 0;
    if matches!(text.first(), Some(b'+' | b'-')) {
        i += 1;
    }
    let (mut digits, mut point) = (0usize, false);
    while let Some(&byte) = text.get(i) {
        match byte {
            b'0'..=b'9' => digits += 1,
            b'.' if !point => point = true,
            _ => break,
        }
        i += 1;
    }
    if digits == 0 {
        // A bare sign or point is a number without digits; anything else is a stray byte.
        return match text.first() {
            Some(&byte) if i == 0 => Err(GaugeError::Unexpected { byte, column: column(0) }),
            _ => Err(GaugeError::NoDigits),
        };
    }
    if digits > 15 {
        return Err(GaugeError::TooLong(digits));
    }
    let number_end = i;
    while text.get(i).is_some_and(is_blank) {
        i += 1;
    }
    let unit = match &text[i..] {
        [] => default_unit,
        rest if rest.eq_ignore_ascii_case(b"mm") => LengthUnit::Mm,
        rest if rest.eq_ignore_ascii_case(b"in") => LengthUnit::In,
        rest => {
            // Name the first byte that breaks the grammar: inside a near-miss unit, or the first one.
            let unit_like = [&b"mm"[..], &b"in"[..]].into_iter().find(|u| u[0].eq_ignore_ascii_case(&rest[0]));
            let bad = unit_like.map_or(0, |unit| {
                (0..rest.len()).find(|&k| k >= 2 || !rest[k].eq_ignore_ascii_case(&unit[k])).unwrap_or(rest.len() - 1)
            });
            let at = i + bad;
            return Err(GaugeError::Unexpected { byte: text[at], column: column(at) });
        }
    };
    // The slice is ASCII sign, digits and at most one point: Rust's float grammar accepts it.
    let number = std::str::from_utf8(&text[..number_end]).ok().and_then(|s| s.parse::<f64>().ok());
    let number = number.ok_or(GaugeError::NoDigits)?;
    Ok(number * unit.to_mm())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn lines(splitter: &mut LineSplitter) -> Vec<Vec<u8>> {
        std::iter::from_fn(|| splitter.next_line()).collect()
    }

    #[test]
    fn splits_at_cr_lf_and_crlf() {
        let mut s = LineSplitter::default();
        s.push(b"1.000\r2.000\n3.000\r\n4.0");
        assert_eq!(lines(&mut s), vec![b"1.000".to_vec(), b"2.000".to_vec(), b"3.000".to_vec()]);
        s.push(b"00\r\n");
        assert_eq!(lines(&mut s), vec![b"4.000".to_vec()]);
    }

    #[test]
    fn over_long_line_is_discarded_and_stream_goes_on() {
        let mut s = LineSplitter::new(8);
        s.push(b"123456789012345\r\n");
        s.push(b"0.5\n");
        assert_eq!(lines(&mut s), vec![b"0.5".to_vec()]);
        assert_eq!(s.discarded_lines(), 1);
    }

    #[test]
    fn non_utf8_noise_never_ends_the_stream() {
        let mut s = LineSplitter::default();
        s.push(&[0xFF, 0xFE, b'\n', 0xC3, 0x28, b'\r', b'\n']);
        s.push(b"+0.125 mm\r\n");
        let got = lines(&mut s);
        assert_eq!(got.len(), 3);
        assert!(parse_reading(&got[0], LengthUnit::Mm).is_err());
        assert!(parse_reading(&got[1], LengthUnit::Mm).is_err());
        assert_eq!(parse_reading(&got[2], LengthUnit::Mm), Ok(0.125));
    }

    #[test]
    fn grammar_accepts_signs_points_and_units() {
        let mm = |s: &str| parse_reading(s.as_bytes(), LengthUnit::Mm);
        assert_eq!(mm("12.345"), Ok(12.345));
        assert_eq!(mm("  -0.002  "), Ok(-0.002));
        assert_eq!(mm("+3"), Ok(3.0));
        assert_eq!(mm(".5"), Ok(0.5));
        assert_eq!(mm("5."), Ok(5.0));
        assert_eq!(mm("1.5mm"), Ok(1.5));
        assert_eq!(mm("1.5 MM"), Ok(1.5));
        // 1 in = 25.4 mm exactly (international inch).
        assert_eq!(mm("0.1000 in"), Ok(0.1 * 25.4));
        assert_eq!(parse_reading(b"2", LengthUnit::In), Ok(50.8));
    }

    #[test]
    fn grammar_refuses_everything_else_naming_the_column() {
        let mm = |s: &str| parse_reading(s.as_bytes(), LengthUnit::Mm);
        assert_eq!(mm(""), Err(GaugeError::Blank));
        assert_eq!(mm("   "), Err(GaugeError::Blank));
        assert_eq!(mm("-"), Err(GaugeError::NoDigits));
        assert_eq!(mm("."), Err(GaugeError::NoDigits));
        assert_eq!(mm("1.2.3"), Err(GaugeError::Unexpected { byte: b'.', column: 4 }));
        assert_eq!(mm("1e3"), Err(GaugeError::Unexpected { byte: b'e', column: 2 }));
        assert_eq!(mm("1,5"), Err(GaugeError::Unexpected { byte: b',', column: 2 }));
        assert_eq!(mm("--1"), Err(GaugeError::NoDigits));
        assert_eq!(mm("12 cm"), Err(GaugeError::Unexpected { byte: b'c', column: 4 }));
        assert_eq!(mm("12 mmm"), Err(GaugeError::Unexpected { byte: b'm', column: 6 }));
        assert_eq!(mm("ERR"), Err(GaugeError::Unexpected { byte: b'E', column: 1 }));
        assert_eq!(mm("nan"), Err(GaugeError::Unexpected { byte: b'n', column: 1 }));
        assert_eq!(mm("inf"), Err(GaugeError::Unexpected { byte: b'i', column: 1 }));
        assert_eq!(mm("1234567890123456"), Err(GaugeError::TooLong(16)));
    }

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(5000))]
        /// Any bytes: the splitter and the parser never panic, and a valid reading sent after the noise
        /// (behind a line end) is always recovered.
        #[test]
        fn noise_then_reading_is_recovered(noise in proptest::collection::vec(proptest::num::u8::ANY, 0..300), value in -99_999i32..99_999) {
            let mut s = LineSplitter::default();
            s.push(&noise);
            for line in lines(&mut s) {
                let _ = parse_reading(&line, LengthUnit::Mm);
            }
            let text = format!("\n{}.{:03}\r\n", value / 1000, (value % 1000).abs());
            s.push(text.as_bytes());
            let got = lines(&mut s);
            let last = got.last().expect("the reading's line");
            let expected: f64 = text.trim().parse().unwrap();
            proptest::prop_assert_eq!(parse_reading(last, LengthUnit::Mm), Ok(expected));
        }
    }
}

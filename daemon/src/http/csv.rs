//! A small RFC 4180 CSV writer: CRLF line ends, fields with a comma, quote, CR or LF quoted and their quotes
//! doubled. Numbers are written to seven significant figures with `.` decimals and no thousands separator; empty for missing values.

/// `x` to seven significant figures: more than any gauge, load cell or construction resolves (a 0.1 µm
/// gauge over 30 mm is six), and no float noise such as `0.17100000000000004`.
fn significant(x: f64) -> f64 {
    format!("{x:.6e}").parse().unwrap_or(x)
}

/// One CSV document being written.
#[derive(Default)]
pub(crate) struct Csv {
    text: String,
}

/// One cell.
#[derive(Clone, Copy)]
pub(crate) enum Cell<'a> {
    /// Text, quoted when needed.
    Text(&'a str),
    /// A number, or empty.
    Number(Option<f64>),
    /// A whole number.
    Int(i64),
}

impl Csv {
    /// Adds a record.
    pub(crate) fn row(&mut self, cells: &[Cell<'_>]) {
        for (i, cell) in cells.iter().enumerate() {
            if i > 0 {
                self.text.push(',');
            }
            match cell {
                Cell::Text(t) => self.text.push_str(&quote(t)),
                Cell::Number(Some(x)) if x.is_finite() => self.text.push_str(&significant(*x).to_string()),
                Cell::Number(_) => {}
                Cell::Int(n) => self.text.push_str(&n.to_string()),
            }
        }
        self.text.push_str("\r\n");
    }

    /// Adds a header record of plain names.
    pub(crate) fn header(&mut self, names: &[&str]) {
        let cells: Vec<Cell<'_>> = names.iter().map(|n| Cell::Text(n)).collect();
        self.row(&cells);
    }

    /// The document.
    pub(crate) fn finish(self) -> String {
        self.text
    }
}

/// A field as RFC 4180 §2 items 5–7 want it.
pub(crate) fn quote(field: &str) -> String {
    if field.contains([',', '"', '\r', '\n']) {
        format!("\"{}\"", field.replace('"', "\"\""))
    } else {
        field.to_string()
    }
}

#[cfg(test)]
mod unit {
    use super::*;

    #[test]
    fn fields_are_quoted_as_rfc_4180_says() {
        let mut csv = Csv::default();
        csv.header(&["a", "b,c"]);
        csv.row(&[
            Cell::Text("say \"hi\""),
            Cell::Text("two\nlines"),
            Cell::Number(Some(0.5)),
            Cell::Number(None),
            Cell::Int(-3),
        ]);
        assert_eq!(csv.finish(), "a,\"b,c\"\r\n\"say \"\"hi\"\"\",\"two\nlines\",0.5,,-3\r\n");
    }

    #[test]
    fn numbers_carry_seven_significant_figures_and_no_float_noise() {
        let mut csv = Csv::default();
        csv.row(&[
            Cell::Number(Some(0.1 + 0.07100000000000004 - 0.1)),
            Cell::Number(Some(0.171_000_000_000_000_04)),
            Cell::Number(Some(12.345_678_9)),
            Cell::Number(Some(1.234_567_89e-10)),
        ]);
        assert_eq!(csv.finish(), "0.071,0.171,12.34568,0.0000000001234568\r\n");
    }
}

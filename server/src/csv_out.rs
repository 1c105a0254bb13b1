//! CSV written for spreadsheets: the figures download (`GET .../figures` as `text/csv`) and
//! `loopbal what-if --format csv`. Every CSV the service or the CLI writes goes through
//! [`Table`], which knows each cell as text or number.
//!
//! A spreadsheet runs a cell that begins with `=`, `+`, `-` or `@` (or a tab, a carriage
//! return or a line feed, which some strip first; or the full-width forms of the four, which
//! some read alike) as a formula. Names are held to a safe set when a model is admitted
//! (reconcile::names), but text from elsewhere (a stored revision older than that rule, an
//! engine message, a setting) may still begin so. So a text cell that does is written with a
//! single quote before it, which spreadsheets show as text and do not run. Numbers are written
//! as numbers, never prefixed: a negative number is `-1.5`, as a spreadsheet should read it.

use std::borrow::Cow;

/// The characters that make a cell beginning with them a formula to some spreadsheet.
const FORMULA_STARTS: [char; 11] = [
    '=', '+', '-', '@', '\t', '\r', '\n', '\u{ff1d}', '\u{ff0b}', '\u{ff0d}', '\u{ff20}',
];

/// A text cell as written: with a leading `'` when it begins like a formula.
pub fn text_cell(text: &str) -> Cow<'_, str> {
    if text.starts_with(FORMULA_STARTS) {
        Cow::Owned(format!("'{text}"))
    } else {
        Cow::Borrowed(text)
    }
}

/// A number cell as written: Rust's shortest form that reads back as the same f64, so the CSV
/// and JSON answers agree number for number; empty for none.
pub fn number_cell(value: Option<f64>) -> String {
    value.map(|v| v.to_string()).unwrap_or_default()
}

/// One cell of a row.
#[derive(Debug, Clone, Copy)]
pub enum Cell<'a> {
    /// Names, tags, notes, reasons, times, words: neutralised by [`text_cell`].
    Text(&'a str),
    /// Written by [`number_cell`], as it is.
    Number(Option<f64>),
}

/// A CSV document being written: a header, then rows of cells.
pub struct Table {
    out: csv::Writer<Vec<u8>>,
}

impl Table {
    pub fn new(header: &[&str]) -> Result<Table, csv::Error> {
        let mut out = csv::Writer::from_writer(Vec::new());
        out.write_record(header.iter().map(|h| text_cell(h).into_owned()))?;
        Ok(Table { out })
    }

    pub fn row(&mut self, cells: &[Cell]) -> Result<(), csv::Error> {
        self.out.write_record(cells.iter().map(|c| match *c {
            Cell::Text(t) => text_cell(t).into_owned(),
            Cell::Number(v) => number_cell(v),
        }))
    }

    /// The document's bytes.
    pub fn finish(mut self) -> Result<Vec<u8>, csv::Error> {
        self.out.flush()?;
        self.out
            .into_inner()
            .map_err(|e| csv::Error::from(e.into_error()))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_that_begins_like_a_formula_is_kept_as_text() {
        for hostile in [
            "=1+2",
            "+x",
            "-x",
            "@SUM(A1)",
            "\t=1",
            "\r=1",
            "\n=1",
            "\u{ff1d}1+2",
        ] {
            assert_eq!(text_cell(hostile), format!("'{hostile}"), "{hostile:?}");
        }
        for plain in [
            "TH2-FI-601",
            "co-to-methanol",
            "purge_fraction",
            "",
            "a=b",
            "'x",
        ] {
            assert_eq!(text_cell(plain), plain);
        }
    }

    #[test]
    fn numbers_are_never_prefixed_and_rows_are_quoted_as_csv() {
        let mut t = Table::new(&["name", "value"]).unwrap();
        t.row(&[Cell::Text("-x, \"y\""), Cell::Number(Some(-1.5))])
            .unwrap();
        t.row(&[Cell::Text("=HYPERLINK(\"http://x\")"), Cell::Number(None)])
            .unwrap();
        t.row(&[Cell::Text("plain"), Cell::Number(Some(0.1 + 0.2))])
            .unwrap();
        let text = String::from_utf8(t.finish().unwrap()).unwrap();
        assert_eq!(
            text,
            "name,value\n\
             \"'-x, \"\"y\"\"\",-1.5\n\
             \"'=HYPERLINK(\"\"http://x\"\")\",\n\
             plain,0.30000000000000004\n"
        );
        // Read back, the cells are what was meant.
        let mut reader = csv::Reader::from_reader(text.as_bytes());
        let rows: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
        assert_eq!(&rows[0][0], "'-x, \"y\"");
        assert_eq!(rows[0][1].parse::<f64>().unwrap(), -1.5);
    }
}

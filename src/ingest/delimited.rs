//! Records of delimited text over `csv_core`, with the parser's state machine built once
//! per delimiter and thread and reset for each file.
//!
//! Building a `csv_core` reader compiles its state machine, which costs more than reading
//! a small export: a backfill of one-cycle files spent a fifth of its time there. The
//! quoting rules are `csv_core`'s defaults (RFC 4180 double quotes, doubled to escape;
//! empty lines skipped; every row may have its own width).

use std::cell::RefCell;

use csv_core::ReadRecordResult;

thread_local! {
    /// Readers not in use, by delimiter byte. Boxed: a reader is some hundred bytes of
    /// tables, copied at every move of the [`Records`] that holds it.
    static IDLE: RefCell<Vec<(u8, Box<csv_core::Reader>)>> = const { RefCell::new(Vec::new()) };
}

/// One record: its fields, and the byte offset in the input where reading it began (before
/// any empty lines skipped ahead of it).
#[derive(Debug, Default)]
pub(crate) struct Record {
    fields: Vec<u8>,
    ends: Vec<usize>,
    len: usize,
    start: usize,
}

impl Record {
    pub(crate) fn len(&self) -> usize {
        self.len
    }

    /// Byte offset in the input where reading this record began.
    pub(crate) fn start(&self) -> usize {
        self.start
    }

    /// Field `i` as text. The input is text and fields are split only at ASCII bytes
    /// (delimiters, quotes, line ends), so a field is always whole characters; `None` only
    /// past the last field.
    pub(crate) fn get(&self, i: usize) -> Option<&str> {
        if i >= self.len {
            return None;
        }
        let from = if i == 0 { 0 } else { *self.ends.get(i - 1)? };
        let to = *self.ends.get(i)?;
        std::str::from_utf8(self.fields.get(from..to)?).ok()
    }

    /// The fields' bytes back to back, and where each field ends: two records give equal
    /// pairs exactly when their fields are equal.
    pub(crate) fn raw(&self) -> (&[u8], &[usize]) {
        let ends = self.ends.get(..self.len).unwrap_or(&[]);
        let n = ends.last().copied().unwrap_or(0);
        (self.fields.get(..n).unwrap_or(&[]), ends)
    }

    pub(crate) fn iter(&self) -> impl Iterator<Item = &str> + '_ {
        (0..self.len).map(|i| self.get(i).unwrap_or(""))
    }

    /// A record of the given cells (a spreadsheet's row, read as text), so that a row from
    /// any source goes through the same field checks.
    pub(crate) fn from_cells<S: AsRef<str>>(cells: &[S]) -> Record {
        let mut fields = Vec::new();
        let mut ends = Vec::with_capacity(cells.len());
        for c in cells {
            fields.extend_from_slice(c.as_ref().as_bytes());
            ends.push(fields.len());
        }
        Record {
            fields,
            ends,
            len: cells.len(),
            start: 0,
        }
    }
}

/// The records of one text, in order.
pub(crate) struct Records<'a> {
    core: Option<Box<csv_core::Reader>>,
    delimiter: u8,
    input: &'a [u8],
    pos: usize,
    done: bool,
}

impl<'a> Records<'a> {
    pub(crate) fn new(text: &'a str, delimiter: u8) -> Self {
        let core = IDLE
            .with(|idle| {
                let mut idle = idle.borrow_mut();
                let at = idle.iter().position(|(d, _)| *d == delimiter)?;
                Some(idle.swap_remove(at).1)
            })
            .map(|mut r| {
                r.reset();
                r
            })
            .unwrap_or_else(|| {
                Box::new(csv_core::ReaderBuilder::new().delimiter(delimiter).build())
            });
        Records {
            core: Some(core),
            delimiter,
            input: text.as_bytes(),
            pos: 0,
            done: false,
        }
    }

    /// Read the next record into `rec`; false at the end of the input.
    pub(crate) fn read(&mut self, rec: &mut Record) -> bool {
        rec.len = 0;
        rec.start = self.pos;
        let Some(core) = self.core.as_mut() else {
            return false;
        };
        if self.done {
            return false;
        }
        if rec.fields.is_empty() {
            rec.fields.resize(256, 0);
        }
        if rec.ends.is_empty() {
            rec.ends.resize(32, 0);
        }
        let (mut outlen, mut endlen) = (0, 0);
        loop {
            let input = self.input.get(self.pos..).unwrap_or(&[]);
            let fields = rec.fields.get_mut(outlen..).unwrap_or(&mut []);
            let ends = rec.ends.get_mut(endlen..).unwrap_or(&mut []);
            let (res, nin, nout, nend) = core.read_record(input, fields, ends);
            self.pos += nin;
            outlen += nout;
            endlen += nend;
            match res {
                // At the end of the input the next call passes an empty slice, which
                // `csv_core` takes as the end: it then returns the last record or End.
                ReadRecordResult::InputEmpty => {}
                ReadRecordResult::OutputFull => {
                    let n = rec.fields.len().max(64) * 2;
                    rec.fields.resize(n, 0);
                }
                ReadRecordResult::OutputEndsFull => {
                    let n = rec.ends.len().max(8) * 2;
                    rec.ends.resize(n, 0);
                }
                ReadRecordResult::Record => {
                    rec.len = endlen;
                    return true;
                }
                ReadRecordResult::End => {
                    self.done = true;
                    return false;
                }
            }
        }
    }
}

impl Drop for Records<'_> {
    fn drop(&mut self) {
        if let Some(core) = self.core.take() {
            let delimiter = self.delimiter;
            // During thread teardown the cache may be gone already; the reader is dropped.
            let _ = IDLE.try_with(|idle| {
                if let Ok(mut idle) = idle.try_borrow_mut() {
                    idle.push((delimiter, core));
                }
            });
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn all(text: &str, d: u8) -> Vec<(usize, Vec<String>)> {
        let mut r = Records::new(text, d);
        let mut rec = Record::default();
        let mut out = Vec::new();
        while r.read(&mut rec) {
            out.push((rec.start(), rec.iter().map(str::to_owned).collect()));
        }
        out
    }

    #[test]
    fn quotes_empty_lines_and_widths() {
        let got = all("a,b\n\n\"x,\"\"y\",2,3\r\nlast", b',');
        assert_eq!(got.len(), 3);
        assert_eq!(got[0], (0, vec!["a".to_string(), "b".to_string()]));
        assert_eq!(got[1].1, vec!["x,\"y", "2", "3"]);
        // Reading the second record began right after the first line's terminator.
        assert_eq!(got[1].0, 4);
        assert_eq!(got[2].1, vec!["last"]);
    }

    #[test]
    fn reused_reader_starts_clean() {
        // An unterminated quote must not leak into the next text read on this thread.
        assert_eq!(all("\"open,1", b';').len(), 1);
        assert_eq!(all("a;b\n", b';'), vec![(0, vec!["a".into(), "b".into()])]);
    }

    #[test]
    fn long_fields_and_many_columns_grow_the_buffers() {
        let long = "é".repeat(5000);
        let wide = (0..500)
            .map(|i| i.to_string())
            .collect::<Vec<_>>()
            .join("\t");
        let got = all(&format!("{long}\t1\n{wide}\n"), b'\t');
        assert_eq!(got[0].1[0], long);
        assert_eq!(got[1].1.len(), 500);
        assert_eq!(got[1].1[499], "499");
    }
}

//! What the logs need beyond `tracing`: paths and error chains shown once and plainly, and
//! journald's priorities when stderr goes to the journal.
//!
//! journald reads a `<N>` prefix on a line written to its stream as that line's syslog
//! priority (sd-daemon(3), `SD_ERR` = 3 ... `SD_DEBUG` = 7); systemd sets `$JOURNAL_STREAM`
//! to the device and inode of that stream, so the prefix is added only when stderr is it.

use std::io::Write;
use std::path::Path;

use tracing::{Level, Metadata};

/// A path as a log field: its Display form (no Debug quoting, so JSON logs hold
/// `"/srv/exports"`, not `"\"/srv/exports\""`), with control characters escaped so a
/// file name cannot forge a log line.
pub fn shown_path(p: &Path) -> String {
    p.display()
        .to_string()
        .chars()
        .map(|c| {
            if c.is_control() {
                c.escape_default().to_string()
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// An error and its causes, each said once: a cause whose text its parent's message
/// already contains (a wrapper that prints its source) is left out.
pub fn causes_once(e: &(dyn std::error::Error + 'static)) -> String {
    let mut out = e.to_string();
    let mut cur = e.source();
    while let Some(c) = cur {
        let text = c.to_string();
        if !out.contains(&text) {
            out.push_str(": ");
            out.push_str(&text);
        }
        cur = c.source();
    }
    out
}

/// [`causes_once`] for an `anyhow` error.
pub fn anyhow_once(e: &anyhow::Error) -> String {
    causes_once(e.as_ref())
}

/// Whether readable logs may use colour: a terminal, and `NO_COLOR` unset or empty
/// (no-color.org).
pub fn colour_wanted(terminal: bool) -> bool {
    terminal && std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty())
}

/// True when stderr is the journal's stream (`$JOURNAL_STREAM` names its device:inode).
pub fn stderr_is_journal() -> bool {
    let Some(stream) = std::env::var_os("JOURNAL_STREAM") else {
        return false;
    };
    let stream = stream.to_string_lossy();
    let Some((dev, ino)) = stream.split_once(':') else {
        return false;
    };
    #[cfg(unix)]
    {
        // SAFETY: fstat writes into the zeroed struct we own; fd 2 is only inspected.
        let mut st: libc::stat = unsafe { std::mem::zeroed() };
        if unsafe { libc::fstat(2, &mut st) } != 0 {
            return false;
        }
        dev.parse::<u64>().ok() == Some(st.st_dev as u64)
            && ino.parse::<u64>().ok() == Some(st.st_ino as u64)
    }
    #[cfg(not(unix))]
    {
        let _ = (dev, ino);
        false
    }
}

/// The syslog priority journald gives a line of this level.
pub fn priority(level: &Level) -> u8 {
    match *level {
        Level::ERROR => 3,
        Level::WARN => 4,
        Level::INFO => 6,
        Level::DEBUG | Level::TRACE => 7,
    }
}

/// Writes each log line to stderr, prefixed with its journald priority when `prefix`.
#[derive(Debug, Clone, Copy)]
pub struct StderrWriter {
    pub prefix: bool,
}

/// One event's writer: the prefix goes before its first byte.
pub struct PrefixedLine {
    prefix: Option<u8>,
}

impl Write for PrefixedLine {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        let mut err = std::io::stderr().lock();
        if let Some(p) = self.prefix.take() {
            write!(err, "<{p}>")?;
        }
        err.write_all(buf)?;
        Ok(buf.len())
    }

    fn flush(&mut self) -> std::io::Result<()> {
        std::io::stderr().flush()
    }
}

impl<'a> tracing_subscriber::fmt::MakeWriter<'a> for StderrWriter {
    type Writer = PrefixedLine;

    fn make_writer(&'a self) -> Self::Writer {
        PrefixedLine { prefix: None }
    }

    fn make_writer_for(&'a self, meta: &Metadata<'_>) -> Self::Writer {
        PrefixedLine {
            prefix: self.prefix.then(|| priority(meta.level())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[derive(Debug, thiserror::Error)]
    #[error("database error: {0}")]
    struct Wrapper(#[source] Inner);

    #[derive(Debug, thiserror::Error)]
    #[error("disk full")]
    struct Inner;

    #[derive(Debug, thiserror::Error)]
    #[error("cannot store file a.csv")]
    struct Outer(#[source] Wrapper);

    #[test]
    fn each_cause_is_said_once() {
        assert_eq!(
            causes_once(&Outer(Wrapper(Inner))),
            "cannot store file a.csv: database error: disk full"
        );
    }

    #[test]
    fn paths_are_shown_plain_with_control_characters_escaped() {
        assert_eq!(
            shown_path(Path::new("/srv/exports/hplc")),
            "/srv/exports/hplc"
        );
        assert_eq!(shown_path(Path::new("/srv/a\nb")), "/srv/a\\nb");
    }

    #[test]
    fn levels_map_to_journald_priorities() {
        assert_eq!(priority(&Level::ERROR), 3);
        assert_eq!(priority(&Level::WARN), 4);
        assert_eq!(priority(&Level::INFO), 6);
    }
}

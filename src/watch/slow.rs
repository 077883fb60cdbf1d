//! Writing a file the way a slow instrument does, for tests and the demo's simulated plant.

use std::fs::File;
use std::io::{self, Write};
use std::path::Path;
use std::time::Duration;

/// Writes `bytes` to `path` in `chunks` pieces (at least one) through one open handle,
/// pausing between pieces so the whole write takes about `over`. The handle is closed only
/// after the last piece, as an instrument's export routine does. Blocking: call it from a
/// thread or `spawn_blocking`, not from async code.
pub fn write_slowly(path: &Path, bytes: &[u8], chunks: usize, over: Duration) -> io::Result<()> {
    let chunks = chunks.max(1);
    let piece = bytes.len().div_ceil(chunks).max(1);
    // More chunks than bytes gives fewer pieces; spread the pauses over the real pieces.
    let pieces_total = bytes.len().div_ceil(piece).max(1);
    let pauses = u32::try_from(pieces_total - 1).unwrap_or(u32::MAX);
    let pause = if pauses == 0 {
        Duration::ZERO
    } else {
        over / pauses
    };
    let mut file = File::create(path)?;
    let mut pieces = bytes.chunks(piece).peekable();
    if pieces.peek().is_none() {
        // Empty content still takes the requested time, like an instrument that stalls.
        std::thread::sleep(over);
    }
    while let Some(part) = pieces.next() {
        file.write_all(part)?;
        file.flush()?;
        if pieces.peek().is_some() {
            std::thread::sleep(pause);
        }
    }
    file.sync_all()?;
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn content_is_complete_whatever_the_chunking() {
        let tmp = tempfile::tempdir().unwrap();
        let data: Vec<u8> = (0..=255u8).cycle().take(1000).collect();
        for chunks in [0, 1, 3, 7, 1000, 5000] {
            let p = tmp.path().join(format!("f{chunks}"));
            write_slowly(&p, &data, chunks, Duration::ZERO).unwrap();
            assert_eq!(std::fs::read(&p).unwrap(), data, "chunks = {chunks}");
        }
        let p = tmp.path().join("empty");
        write_slowly(&p, b"", 4, Duration::ZERO).unwrap();
        assert_eq!(std::fs::metadata(&p).unwrap().len(), 0);
    }
}

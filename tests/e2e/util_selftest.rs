//! Checks of the test helpers that need real peer programs (socat); the rest are unit tests in the
//! library. It must not test oedolog itself.

use std::io::{Read, Write};
use std::time::Duration;

use anyhow::{Context, Result};
use oedolog_tests::{pty_pair, temp_dir};

// Peer: socat 1.7.4 (Debian) pty pair; bytes written at one end must come out of the other.
#[test]
fn socat_pty_pair_carries_bytes_both_ways() -> Result<()> {
    let dir = temp_dir();
    let line = pty_pair(dir.path())?;
    let open = |path: &std::path::Path| {
        serialport::new(path.to_string_lossy(), 19_200)
            .timeout(Duration::from_secs(5))
            .open()
            .with_context(|| format!("open {}", path.display()))
    };
    let mut ends = [open(&line.master_end)?, open(&line.device_end)?];
    for (from, bytes) in [(0, b"\x01\x03\x00\x00"), (1, b"\xFF\x00\x7E\x0A")] {
        ends[from].write_all(bytes)?;
        ends[from].flush()?;
        let mut got = [0u8; 4];
        ends[1 - from].read_exact(&mut got)?;
        assert_eq!(&got, bytes, "bytes written at end {from}");
    }
    Ok(())
}

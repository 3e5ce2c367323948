//! The timing of an RS-485 line, for `--line-timing`: how long characters and frames take on the wire
//! and the silences between them, so a pseudo-terminal pair (which moves bytes at once) behaves like a
//! cable at the configured baud rate and framing.
//!
//! The model (Modbus over Serial Line Specification and Implementation Guide V1.02, §2.5.1 and
//! §2.5.1.1): a character is 1 start bit, 8 data bits, a parity bit or a second stop bit, and a stop bit —
//! 11 bits for 8E1, 8O1 and 8N2 (10 for 8N1, which the specification allows only as a non-compliant
//! option); the character time is bits / baud. Frames are separated by at least 3.5 character times of
//! silence (t3.5) and a frame's characters by at most 1.5 (t1.5); above 19 200 baud the specification
//! fixes t3.5 at 1.750 ms and t1.5 at 0.750 ms. A request counts as received when its last character has
//! been on the wire (first byte seen + length × character time) and the line has then been silent for
//! t3.5; the device then waits its turnaround and releases each reply character no earlier than its last
//! bit leaves the wire. Nothing here reads a clock: the server takes instants from it.

use std::time::Duration;

/// Framing and speed of one simulated line.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LineTiming {
    /// Bits per second.
    pub baud: u32,
    /// Bits per character: start + 8 data + parity + stop bits.
    pub bits_per_char: u32,
    /// The device's processing time between recognising a request and starting its reply.
    pub turnaround: Duration,
}

impl LineTiming {
    /// A line at `baud` with `parity` (true when there is a parity bit) and `stop_bits` (1 or 2).
    pub fn new(baud: u32, parity: bool, stop_bits: u32, turnaround: Duration) -> LineTiming {
        LineTiming { baud: baud.max(1), bits_per_char: 1 + 8 + u32::from(parity) + stop_bits, turnaround }
    }

    /// One character on the wire: bits / baud.
    pub fn char_time(&self) -> Duration {
        Duration::from_secs_f64(f64::from(self.bits_per_char) / f64::from(self.baud))
    }

    /// `n` characters back to back.
    pub fn wire_time(&self, n: usize) -> Duration {
        Duration::from_secs_f64(n as f64 * f64::from(self.bits_per_char) / f64::from(self.baud))
    }

    /// t3.5: 3.5 character times, fixed at 1.750 ms above 19 200 baud (V1.02 §2.5.1.1).
    pub fn t3_5(&self) -> Duration {
        if self.baud > 19_200 { Duration::from_micros(1_750) } else { self.char_time().mul_f64(3.5) }
    }

    /// t1.5: 1.5 character times, fixed at 0.750 ms above 19 200 baud (V1.02 §2.5.1.1).
    pub fn t1_5(&self) -> Duration {
        if self.baud > 19_200 { Duration::from_micros(750) } else { self.char_time().mul_f64(1.5) }
    }

    /// From the first byte of a `request_len`-byte request to the last byte of a `reply_len`-byte reply
    /// leaving the wire: request, t3.5, turnaround, reply.
    pub fn exchange_time(&self, request_len: usize, reply_len: usize) -> Duration {
        self.wire_time(request_len) + self.t3_5() + self.turnaround + self.wire_time(reply_len)
    }

    /// The line's limit in transactions per second by the specification's timing alone: request and
    /// reply characters plus the two t3.5 silences (after the request, and before the next one), no
    /// turnaround.
    pub fn limit_per_s(&self, request_len: usize, reply_len: usize) -> f64 {
        1.0 / (self.wire_time(request_len + reply_len) + self.t3_5() * 2).as_secs_f64()
    }

    /// Offsets from the reply's start at which each of `reply_len` characters has fully left the wire:
    /// character i (from 0) no earlier than (i + 1) character times.
    pub fn release_offsets(&self, reply_len: usize) -> impl Iterator<Item = Duration> + '_ {
        (1..=reply_len).map(|i| self.wire_time(i))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // Check values computed by hand from V1.02 §2.5.1.1: 11 bits at 9 600 baud = 1.1458 ms a character,
    // t3.5 = 4.0104 ms; at 19 200 baud 0.5729 ms and 2.0052 ms; above 19 200 fixed 1.75 / 0.75 ms.
    #[test]
    fn character_and_silence_times_follow_the_serial_line_specification() {
        let t = LineTiming::new(9_600, true, 1, Duration::ZERO);
        assert_eq!(t.bits_per_char, 11);
        assert!((t.char_time().as_secs_f64() - 11.0 / 9_600.0).abs() < 1e-8);
        assert!((t.t3_5().as_secs_f64() - 3.5 * 11.0 / 9_600.0).abs() < 1e-8);
        assert!((t.t1_5().as_secs_f64() - 1.5 * 11.0 / 9_600.0).abs() < 1e-8);
        let n2 = LineTiming::new(19_200, false, 2, Duration::ZERO);
        assert_eq!(n2.bits_per_char, 11, "8N2 is 11 bits like 8E1");
        assert!((n2.t3_5().as_secs_f64() - 0.002_005_208).abs() < 1e-8);
        let fast = LineTiming::new(115_200, true, 1, Duration::ZERO);
        assert_eq!(fast.t3_5(), Duration::from_micros(1_750));
        assert_eq!(fast.t1_5(), Duration::from_micros(750));
        assert_eq!(LineTiming::new(9_600, false, 1, Duration::ZERO).bits_per_char, 10);
    }

    // FC 04 of 5 registers: an 8-byte request, a 15-byte reply. At 19 200 baud 8E1: 23 × 0.5729 ms +
    // 2 × 2.0052 ms = 17.187 ms, so 58.18 transactions/s.
    #[test]
    fn the_line_limit_counts_both_frames_and_both_silences() {
        let t = LineTiming::new(19_200, true, 1, Duration::from_millis(5));
        assert!((t.limit_per_s(8, 15) - 58.18).abs() < 0.01, "{}", t.limit_per_s(8, 15));
        let ex = t.exchange_time(8, 15).as_secs_f64();
        assert!((ex - (23.0 * 11.0 / 19_200.0 + 3.5 * 11.0 / 19_200.0 + 0.005)).abs() < 1e-8);
        let offsets: Vec<_> = t.release_offsets(3).collect();
        assert_eq!(offsets.len(), 3);
        assert!(offsets[2] > offsets[1] && offsets[0] == t.char_time());
    }
}

//! Reconnect back-off: 1 s, doubling to 60 s, reset after a success.

use std::time::Duration;

/// A doubling back-off.
#[derive(Clone, Debug)]
pub struct Backoff {
    initial: Duration,
    max: Duration,
    next: Duration,
}

impl Default for Backoff {
    fn default() -> Self {
        Backoff::new(Duration::from_secs(1), Duration::from_secs(60))
    }
}

impl Backoff {
    /// Starts at `initial`, doubles up to `max`.
    pub fn new(initial: Duration, max: Duration) -> Self {
        Backoff { initial, max, next: initial }
    }

    /// The wait before the next attempt; the one after will be twice as long (up to the cap).
    pub fn next_wait(&mut self) -> Duration {
        let wait = self.next;
        self.next = (self.next * 2).min(self.max);
        wait
    }

    /// After a success: start again from the initial wait.
    pub fn reset(&mut self) {
        self.next = self.initial;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn doubles_to_the_cap_and_resets() {
        let mut b = Backoff::default();
        let waits: Vec<u64> = (0..9).map(|_| b.next_wait().as_secs()).collect();
        assert_eq!(waits, vec![1, 2, 4, 8, 16, 32, 60, 60, 60]);
        b.reset();
        assert_eq!(b.next_wait(), Duration::from_secs(1));
    }
}

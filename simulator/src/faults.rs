//! Fault injection: what can go wrong between a frame and the logger, each switchable per frame.
//!
//! Wire faults act on a reply (drop it, delay it past the master's deadline, corrupt its CRC, put noise
//! before it, split it into pieces, answer an exception instead, or drop the connection); sensor faults
//! act on the readings (a stuck sensor, a gauge at the end of its travel). Probabilities are per request.

use std::fmt;
use std::str::FromStr;

/// One kind of fault.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum FaultKind {
    /// No reply at all.
    Drop,
    /// The reply comes after [`Faults::delay_ms`], past a typical master's deadline.
    Delay,
    /// The reply's CRC (RTU) or MBAP header (TCP) is corrupted.
    BadCrc,
    /// Random bytes are sent before the reply.
    Noise,
    /// The reply is written in several pieces with short pauses.
    Split,
    /// The device answers exception 04 (server device failure).
    Exception,
    /// TCP: the connection is closed; RTU: the line goes silent for [`Faults::disconnect_s`].
    Disconnect,
    /// The gauge and load cell readings freeze (on/off).
    Stuck,
    /// The gauge is at the end of its travel: the reading pins there (on/off).
    Travel,
}

impl FaultKind {
    /// Every kind, in the order the README lists them.
    pub const ALL: [FaultKind; 9] = [
        FaultKind::Drop,
        FaultKind::Delay,
        FaultKind::BadCrc,
        FaultKind::Noise,
        FaultKind::Split,
        FaultKind::Exception,
        FaultKind::Disconnect,
        FaultKind::Stuck,
        FaultKind::Travel,
    ];

    /// The name used on the command line and in control lines.
    pub fn name(self) -> &'static str {
        match self {
            FaultKind::Drop => "drop",
            FaultKind::Delay => "delay",
            FaultKind::BadCrc => "bad-crc",
            FaultKind::Noise => "noise",
            FaultKind::Split => "split",
            FaultKind::Exception => "exception",
            FaultKind::Disconnect => "disconnect",
            FaultKind::Stuck => "stuck",
            FaultKind::Travel => "travel",
        }
    }

    /// Whether the fault is a switch (on/off) rather than a probability per request.
    pub fn is_switch(self) -> bool {
        matches!(self, FaultKind::Stuck | FaultKind::Travel)
    }
}

impl fmt::Display for FaultKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for FaultKind {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        FaultKind::ALL.into_iter().find(|k| k.name() == s).ok_or_else(|| {
            let names: Vec<_> = FaultKind::ALL.iter().map(|k| k.name()).collect();
            format!("unknown fault `{s}` (allowed: {})", names.join(", "))
        })
    }
}

/// A fault setting: `KIND=VALUE`, where VALUE is a probability 0..=1, or `on`/`off` for switches.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct FaultSetting {
    /// Which fault.
    pub kind: FaultKind,
    /// Probability per request (switches: 1 = on, 0 = off).
    pub value: f64,
}

impl FaultSetting {
    /// Parses `VALUE` for `kind`.
    pub fn parse_value(kind: FaultKind, value: &str) -> Result<FaultSetting, String> {
        let value = match value {
            "on" => 1.0,
            "off" => 0.0,
            number if !kind.is_switch() => match number.parse::<f64>() {
                Ok(p) if (0.0..=1.0).contains(&p) => p,
                _ => return Err(format!("fault `{kind}`: `{number}` is not a probability (allowed: 0 to 1, on, off)")),
            },
            other => return Err(format!("fault `{kind}` is a switch: `{other}` (allowed: on, off)")),
        };
        Ok(FaultSetting { kind, value })
    }
}

impl FromStr for FaultSetting {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let (kind, value) = s.split_once('=').ok_or_else(|| format!("`{s}`: expected KIND=VALUE, e.g. drop=0.05"))?;
        FaultSetting::parse_value(kind.parse()?, value)
    }
}

/// The faults of one frame.
#[derive(Clone, Debug, PartialEq)]
pub struct Faults {
    /// Probability per request of each wire fault.
    pub drop: f64,
    /// See [`FaultKind::Delay`].
    pub delay: f64,
    /// See [`FaultKind::BadCrc`].
    pub bad_crc: f64,
    /// See [`FaultKind::Noise`].
    pub noise: f64,
    /// See [`FaultKind::Split`].
    pub split: f64,
    /// See [`FaultKind::Exception`].
    pub exception: f64,
    /// See [`FaultKind::Disconnect`].
    pub disconnect: f64,
    /// Sensors frozen.
    pub stuck: bool,
    /// Gauge pinned at the end of its travel.
    pub travel: bool,
    /// How late a delayed reply comes, real milliseconds.
    pub delay_ms: u64,
    /// How long an RTU line stays silent after a disconnect, real seconds.
    pub disconnect_s: f64,
}

impl Default for Faults {
    fn default() -> Self {
        Faults {
            drop: 0.0,
            delay: 0.0,
            bad_crc: 0.0,
            noise: 0.0,
            split: 0.0,
            exception: 0.0,
            disconnect: 0.0,
            stuck: false,
            travel: false,
            delay_ms: 1_500,
            disconnect_s: 3.0,
        }
    }
}

impl Faults {
    /// Applies one setting.
    pub fn set(&mut self, setting: FaultSetting) {
        let p = setting.value;
        match setting.kind {
            FaultKind::Drop => self.drop = p,
            FaultKind::Delay => self.delay = p,
            FaultKind::BadCrc => self.bad_crc = p,
            FaultKind::Noise => self.noise = p,
            FaultKind::Split => self.split = p,
            FaultKind::Exception => self.exception = p,
            FaultKind::Disconnect => self.disconnect = p,
            FaultKind::Stuck => self.stuck = p > 0.0,
            FaultKind::Travel => self.travel = p > 0.0,
        }
    }

    /// Draws which wire fault (at most one) strikes this request; `u` is uniform in [0, 1).
    pub fn draw(&self, u: f64) -> Option<FaultKind> {
        let table = [
            (FaultKind::Drop, self.drop),
            (FaultKind::Delay, self.delay),
            (FaultKind::BadCrc, self.bad_crc),
            (FaultKind::Noise, self.noise),
            (FaultKind::Split, self.split),
            (FaultKind::Exception, self.exception),
            (FaultKind::Disconnect, self.disconnect),
        ];
        let mut edge = 0.0;
        for (kind, p) in table {
            edge += p;
            if u < edge {
                return Some(kind);
            }
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn settings_parse_and_refuse_with_the_allowed_values() {
        assert_eq!("drop=0.05".parse(), Ok(FaultSetting { kind: FaultKind::Drop, value: 0.05 }));
        assert_eq!("stuck=on".parse(), Ok(FaultSetting { kind: FaultKind::Stuck, value: 1.0 }));
        assert!("drop=1.5".parse::<FaultSetting>().unwrap_err().contains("allowed: 0 to 1"));
        assert!("stuck=0.5".parse::<FaultSetting>().unwrap_err().contains("allowed: on, off"));
        assert!("fire=0.1".parse::<FaultSetting>().unwrap_err().contains("unknown fault `fire`"));
        assert!("drop".parse::<FaultSetting>().unwrap_err().contains("KIND=VALUE"));
    }

    #[test]
    fn draw_follows_the_probabilities() {
        let mut faults = Faults::default();
        assert_eq!(faults.draw(0.0), None);
        faults.set(FaultSetting { kind: FaultKind::Drop, value: 0.25 });
        faults.set(FaultSetting { kind: FaultKind::BadCrc, value: 0.25 });
        let (mut drops, mut crcs, n) = (0, 0, 10_000);
        for i in 0..n {
            match faults.draw(f64::from(i) / f64::from(n)) {
                Some(FaultKind::Drop) => drops += 1,
                Some(FaultKind::BadCrc) => crcs += 1,
                _ => {}
            }
        }
        assert_eq!((drops, crcs), (2_500, 2_500));
    }
}

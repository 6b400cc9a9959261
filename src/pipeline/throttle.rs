//! Repeated warnings, rate-limited: a flood of bad messages must not become a flood of
//! log lines. Per key, the first warning in a period is logged; the rest are counted and
//! the next logged one says how many were suppressed. Pure: time is passed in.

use std::collections::HashMap;

/// One log line per key per [`Throttle::PERIOD_MS`] at most.
#[derive(Debug, Default)]
pub(crate) struct Throttle {
    /// Per key: when it was last logged, and how many were suppressed since.
    seen: HashMap<(usize, &'static str), (i64, u64)>,
}

impl Throttle {
    /// The period [common practice: syslog-style rate limits of one message per key and
    /// minute keep a journal readable].
    pub(crate) const PERIOD_MS: i64 = 60_000;

    /// Whether to log now: `Some(suppressed)` (how many of this key were held back
    /// since the last line), or `None` to count it and stay quiet.
    pub(crate) fn allow(&mut self, key: (usize, &'static str), now_ms: i64) -> Option<u64> {
        match self.seen.get_mut(&key) {
            Some((at, suppressed)) if now_ms.saturating_sub(*at) < Self::PERIOD_MS => {
                *suppressed += 1;
                None
            }
            Some((at, suppressed)) => {
                let held = *suppressed;
                *at = now_ms;
                *suppressed = 0;
                Some(held)
            }
            None => {
                self.seen.insert(key, (now_ms, 0));
                Some(0)
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn one_line_per_key_and_period_with_the_count_held_back() {
        let mut t = Throttle::default();
        let key = (0, "bad_unit");
        assert_eq!(t.allow(key, 0), Some(0));
        for k in 1..=1000 {
            assert_eq!(t.allow(key, k), None);
        }
        // Another key is not held back by the first.
        assert_eq!(t.allow((1, "bad_unit"), 10), Some(0));
        assert_eq!(t.allow(key, Throttle::PERIOD_MS), Some(1000));
        assert_eq!(t.allow(key, Throttle::PERIOD_MS + 1), None);
    }
}

//! A short, time-ordered buffer of scalar readings with linear interpolation, used to
//! align thermocouples and pressure transmitters to an analysis' sample time.
//! Out-of-order readings are inserted in place; a reading with the timestamp of one
//! already held replaces it (QoS 1 redelivery). Pure: no clock.

use super::SourceQuality;

/// One held reading.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Point {
    pub ts_ms: i64,
    pub value: f64,
    pub quality: SourceQuality,
}

/// What the buffer can say about the value at a time.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Lookup {
    /// Interpolated between neighbours, or the nearest reading within `max_age`.
    /// `age_ms` is the distance to the nearest reading used.
    Value {
        value: f64,
        quality: SourceQuality,
        age_ms: i64,
    },
    /// The nearest reading is older (or newer) than allowed.
    Stale {
        nearest_ts_ms: i64,
    },
    Empty,
}

#[derive(Debug, Clone)]
pub struct ScalarBuffer {
    /// Time-ordered; a ring so that dropping the oldest is O(1).
    points: std::collections::VecDeque<Point>,
    capacity: usize,
}

impl ScalarBuffer {
    /// Room is taken as readings come, up to `capacity` (+1 while an insert is resolved),
    /// never before: a reactor whose temperatures come once a minute holds a few
    /// readings, not a full ring (with 100 reactors the rings taken at start were 1.8 MB).
    pub fn new(capacity: usize) -> Self {
        Self {
            points: std::collections::VecDeque::new(),
            capacity: capacity.max(2),
        }
    }

    /// Memory the ring holds, in readings (for the bound's test).
    pub fn room(&self) -> usize {
        self.points.capacity()
    }

    pub fn len(&self) -> usize {
        self.points.len()
    }

    pub fn is_empty(&self) -> bool {
        self.points.is_empty()
    }

    pub fn latest(&self) -> Option<&Point> {
        self.points.back()
    }

    /// Inserts in time order; drops the oldest when full. Returns false for a reading
    /// older than everything held in a full buffer (it could never be used).
    pub fn insert(&mut self, p: Point) -> bool {
        match self.points.binary_search_by(|q| q.ts_ms.cmp(&p.ts_ms)) {
            Ok(i) => {
                self.points[i] = p;
                true
            }
            Err(i) => {
                if i == 0 && self.points.len() == self.capacity {
                    return false;
                }
                let len = self.points.len();
                if len == self.points.capacity() {
                    // Doubling, but never past the bound (a plain insert would double a
                    // full 257 to 512).
                    let want = (2 * len).max(8).min(self.capacity + 1);
                    self.points.reserve_exact(want - len);
                }
                self.points.insert(i, p);
                if self.points.len() > self.capacity {
                    self.points.pop_front();
                }
                true
            }
        }
    }

    /// The value at `t_ms`: linear between the readings either side when both are
    /// within `max_age_ms` of it, else the nearest one within `max_age_ms`.
    pub fn at(&self, t_ms: i64, max_age_ms: i64) -> Lookup {
        if self.points.is_empty() {
            return Lookup::Empty;
        }
        let i = self.points.partition_point(|q| q.ts_ms <= t_ms);
        let before = i.checked_sub(1).map(|k| self.points[k]);
        let after = self.points.get(i).copied();
        match (before, after) {
            (Some(a), Some(b)) if t_ms - a.ts_ms <= max_age_ms && b.ts_ms - t_ms <= max_age_ms => {
                let w = if b.ts_ms == a.ts_ms {
                    0.0
                } else {
                    (t_ms - a.ts_ms) as f64 / (b.ts_ms - a.ts_ms) as f64
                };
                Lookup::Value {
                    value: a.value + w * (b.value - a.value),
                    quality: a.quality.worst(b.quality),
                    age_ms: (t_ms - a.ts_ms).min(b.ts_ms - t_ms),
                }
            }
            (a, b) => {
                let nearest = [a, b]
                    .into_iter()
                    .flatten()
                    .min_by_key(|p| (p.ts_ms - t_ms).abs())
                    .expect("non-empty buffer has a nearest point");
                let age = (nearest.ts_ms - t_ms).abs();
                if age <= max_age_ms {
                    Lookup::Value {
                        value: nearest.value,
                        quality: nearest.quality,
                        age_ms: age,
                    }
                } else {
                    Lookup::Stale {
                        nearest_ts_ms: nearest.ts_ms,
                    }
                }
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn p(ts: i64, v: f64) -> Point {
        Point {
            ts_ms: ts,
            value: v,
            quality: SourceQuality::Good,
        }
    }

    #[test]
    fn room_is_taken_as_readings_come_and_never_past_the_bound() {
        let mut b = ScalarBuffer::new(256);
        assert_eq!(b.room(), 0, "nothing held before the first reading");
        for k in 0..3 {
            b.insert(p(k, 1.0));
        }
        assert!(
            b.room() < 16,
            "a few readings take little room: {}",
            b.room()
        );
        for k in 3..2000 {
            b.insert(p(k, 1.0));
            assert!(b.room() <= 257, "room {} past the bound", b.room());
        }
        assert_eq!(b.len(), 256);
    }

    #[test]
    fn interpolates_and_reports_staleness() {
        // Invented readings for the test.
        let mut b = ScalarBuffer::new(4);
        assert_eq!(b.at(0, 10), Lookup::Empty);
        b.insert(p(1000, 10.0));
        b.insert(p(3000, 30.0));
        b.insert(p(2000, 20.0)); // out of order
        b.insert(p(2000, 21.0)); // duplicate timestamp replaces
        match b.at(2500, 1000) {
            Lookup::Value { value, .. } => assert!((value - 25.5).abs() < 1e-12),
            o => panic!("{o:?}"),
        }
        // Beyond the newest reading: nearest within max age, else stale.
        assert!(matches!(b.at(3500, 1000), Lookup::Value { value, .. } if value == 30.0));
        assert_eq!(
            b.at(9000, 1000),
            Lookup::Stale {
                nearest_ts_ms: 3000
            }
        );
        // A wide gap: the nearer side within max age is used.
        b.insert(p(20_000, 50.0));
        assert!(matches!(b.at(3400, 1000), Lookup::Value { value, .. } if value == 30.0));
        // Capacity: the oldest goes.
        b.insert(p(21_000, 51.0));
        assert_eq!(b.len(), 4);
        assert!(!b.insert(p(500, 1.0)));
    }
}

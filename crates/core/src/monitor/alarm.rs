//! Alarm state machine for one advisory alarm on a scalar figure (for example the
//! approach to equilibrium of a reactor), following the state model of ISA-18.2 /
//! IEC 62682: normal, unacknowledged, acknowledged, returned-to-normal unacknowledged,
//! and latched; with deadband, on-delay and off-delay (time and sample count),
//! re-alarm, and the shelved, suppressed-by-design and out-of-service modes.
//!
//! Pure: no I/O and no clock. Every call takes `now_ms`; a time earlier than one already
//! seen is treated as that latest time, so timers never run backwards.
//!
//! # Semantics chosen here
//! - Raw condition with deadband: while the alarm is not raised, a sample is in alarm
//!   only when `value > limit` (High; Low mirrored), so the on-delay counts only samples
//!   past the limit and a raised event's value is always past its limit; once raised, a
//!   sample counts as clear only when `value < limit − deadband`, so the deadband (and
//!   the off-delay) govern the clear (ISA-18.2 terms; docs/domain.md §10). Missing data (`None`)
//!   and non-finite values are bad data: they never change the condition and they break
//!   the continuity of a pending on/off delay.
//! - On-delay / off-delay: the raw condition must differ from the debounced condition
//!   for at least the delay in ms and the delay in samples (the first differing sample
//!   counts as one, so 0 and 1 samples both mean "no sample delay").
//! - Re-alarm is checked on `update` only: an alarm acknowledged at `t` with its
//!   condition still active returns to unacknowledged at the first update at or after
//!   `t + realarm_ms`.
//! - Latching (when `config.latched`): a condition that clears while the alarm is
//!   acknowledged moves it to `Latched`; a condition that clears while unacknowledged
//!   moves it to `ReturnedUnacknowledged`, whose acknowledgement moves it to `Latched`.
//!   `Latched` is still annunciated (it is an alarm awaiting an operator reset) and
//!   leaves only by `reset_latch` (to `Normal`) or by the condition returning (to
//!   `Unacknowledged`, raised again). Without latching, `Latched` never occurs.
//! - Hidden modes (shelved, suppressed by design, out of service): nothing annunciates
//!   and no `Raised`/`Cleared`/`Realarmed` events are emitted, but the condition is
//!   tracked and the state follows it silently (a rising condition makes the state
//!   `Unacknowledged`, a clearing one makes it `Normal`; a `Latched` alarm stays
//!   latched). Acknowledge and latch reset are refused while hidden. On return to the
//!   active mode the state is derived again: an active condition is annunciated afresh
//!   as `Unacknowledged` (with a `Raised` event), a cleared one is `Normal` (or stays
//!   `Latched`).
//! - Shelving is time-limited: the shelf expires at `until_ms` and the alarm unshelves
//!   itself (`Unshelved { auto: true }`) on the next call at or after that time.
//! - Entering a hidden mode needs the alarm to be in the active mode; the modes do not
//!   stack.

use thiserror::Error;

/// Which side of the limit is abnormal.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Direction {
    /// Abnormal when the value is above the limit.
    High,
    /// Abnormal when the value is below the limit.
    Low,
}

/// Alarm priority, numbered 1 (highest) to 4 (lowest).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum Priority {
    P1,
    P2,
    P3,
    P4,
}

impl Priority {
    /// From its number, 1 (highest) to 4.
    pub fn from_number(n: i64) -> Option<Self> {
        match n {
            1 => Some(Self::P1),
            2 => Some(Self::P2),
            3 => Some(Self::P3),
            4 => Some(Self::P4),
            _ => None,
        }
    }
    pub fn number(self) -> u8 {
        match self {
            Self::P1 => 1,
            Self::P2 => 2,
            Self::P3 => 3,
            Self::P4 => 4,
        }
    }
}

/// Configuration of one alarm.
#[derive(Debug, Clone, PartialEq)]
pub struct AlarmConfig {
    pub id: String,
    pub limit: f64,
    pub direction: Direction,
    /// In the units of the value; not negative.
    pub deadband: f64,
    pub on_delay_ms: i64,
    pub off_delay_ms: i64,
    pub on_delay_samples: u32,
    pub off_delay_samples: u32,
    pub realarm_ms: Option<i64>,
    pub latched: bool,
    pub priority: Priority,
    pub max_shelve_ms: i64,
}

/// Why a configuration or an operator action was refused.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum AlarmError {
    #[error("alarm id must not be empty")]
    EmptyId,
    #[error("alarm limit must be finite, got {0}")]
    Limit(f64),
    #[error("deadband must be finite and not negative, got {0}")]
    Deadband(f64),
    #[error("{name} must not be negative, got {value} ms")]
    Delay { name: &'static str, value: i64 },
    #[error("re-alarm time must be positive, got {0} ms")]
    Realarm(i64),
    #[error("maximum shelve time must be positive, got {0} ms")]
    MaxShelve(i64),
    #[error("{0} must not be empty")]
    Empty(&'static str),
    #[error("nothing to acknowledge: the alarm is normal")]
    NothingToAcknowledge,
    #[error("the alarm is already acknowledged")]
    AlreadyAcknowledged,
    #[error("shelve duration must be more than 0 and at most {max_ms} ms, got {got_ms} ms")]
    ShelveDuration { got_ms: i64, max_ms: i64 },
    #[error("the alarm is {0}; this needs it in service and not shelved or suppressed")]
    NotActive(&'static str),
    #[error("the alarm is not shelved")]
    NotShelved,
    #[error("the alarm is not suppressed by design")]
    NotSuppressed,
    #[error("the alarm is not out of service")]
    NotOutOfService,
    #[error("no latch to reset: the alarm is {0}")]
    NoLatch(&'static str),
}

impl AlarmConfig {
    /// Checks the configuration: a finite limit, a finite deadband ≥ 0, delays ≥ 0,
    /// a positive re-alarm time when given, and a positive maximum shelve time.
    pub fn validate(&self) -> Result<(), AlarmError> {
        if self.id.trim().is_empty() {
            return Err(AlarmError::EmptyId);
        }
        if !self.limit.is_finite() {
            return Err(AlarmError::Limit(self.limit));
        }
        if !(self.deadband.is_finite() && self.deadband >= 0.0) {
            return Err(AlarmError::Deadband(self.deadband));
        }
        for (name, value) in [
            ("on-delay", self.on_delay_ms),
            ("off-delay", self.off_delay_ms),
        ] {
            if value < 0 {
                return Err(AlarmError::Delay { name, value });
            }
        }
        if let Some(r) = self.realarm_ms {
            if r <= 0 {
                return Err(AlarmError::Realarm(r));
            }
        }
        if self.max_shelve_ms <= 0 {
            return Err(AlarmError::MaxShelve(self.max_shelve_ms));
        }
        Ok(())
    }
}

/// Alarm state (ISA-18.2 state model, plus `Latched`; see the module notes).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum State {
    Normal,
    Unacknowledged,
    Acknowledged,
    ReturnedUnacknowledged,
    /// Condition cleared and acknowledged, awaiting an operator reset.
    Latched,
}

impl State {
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Normal => "normal",
            Self::Unacknowledged => "unacknowledged",
            Self::Acknowledged => "acknowledged",
            Self::ReturnedUnacknowledged => "returned-to-normal unacknowledged",
            Self::Latched => "latched",
        }
    }
}

/// Alarm mode.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Mode {
    Active,
    Shelved {
        until_ms: i64,
        by: String,
        reason: String,
    },
    SuppressedByDesign {
        reason: String,
    },
    OutOfService {
        by: String,
        reason: String,
    },
}

impl Mode {
    pub fn as_str(&self) -> &'static str {
        match self {
            Self::Active => "active",
            Self::Shelved { .. } => "shelved",
            Self::SuppressedByDesign { .. } => "suppressed by design",
            Self::OutOfService { .. } => "out of service",
        }
    }
}

/// What happened, for the shell to publish.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum EventKind {
    Raised,
    Cleared,
    Acknowledged {
        by: String,
    },
    Realarmed,
    LatchReset {
        by: String,
    },
    Shelved {
        by: String,
        reason: String,
        until_ms: i64,
    },
    /// `auto` when the shelf expired; `by` is then `None`.
    Unshelved {
        auto: bool,
        by: Option<String>,
    },
    Suppressed {
        reason: String,
    },
    Unsuppressed,
    OutOfService {
        by: String,
        reason: String,
    },
    ReturnedToService {
        by: String,
    },
}

/// One event with its time and a stable id (`"{config.id}#{seq}"`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Event {
    pub id: String,
    pub seq: u64,
    pub at_ms: i64,
    pub kind: EventKind,
}

/// A raw condition that differs from the debounced one, waiting out its delay.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Pending {
    since_ms: i64,
    samples: u32,
}

/// An alarm's state and mode, to carry them over a restart (a pending delay is not kept:
/// it starts again with the next sample).
#[derive(Debug, Clone, PartialEq)]
pub struct AlarmSnapshot {
    pub state: State,
    pub mode: Mode,
    pub raw: bool,
    pub condition: bool,
    pub acknowledged_ms: Option<i64>,
    pub last_annunciated_ms: Option<i64>,
    pub latest_ms: i64,
    pub seq: u64,
}

/// One alarm.
#[derive(Debug, Clone, PartialEq)]
pub struct Alarm {
    config: AlarmConfig,
    state: State,
    mode: Mode,
    /// Raw condition after the deadband.
    raw: bool,
    /// Debounced condition.
    condition: bool,
    pending: Option<Pending>,
    acknowledged_ms: Option<i64>,
    last_annunciated_ms: Option<i64>,
    latest_ms: i64,
    seq: u64,
    /// The state and acknowledgement time when suppression by design began, kept while
    /// the condition does not change, so the return does not raise again what the
    /// operator had already seen.
    kept: Option<(State, Option<i64>)>,
}

impl Alarm {
    pub fn new(config: AlarmConfig) -> Result<Self, AlarmError> {
        config.validate()?;
        Ok(Self {
            config,
            state: State::Normal,
            mode: Mode::Active,
            raw: false,
            condition: false,
            pending: None,
            acknowledged_ms: None,
            last_annunciated_ms: None,
            latest_ms: i64::MIN,
            seq: 0,
            kept: None,
        })
    }

    /// Moves the limit and deadband (for an alert whose limit is learned with the run's
    /// baseline); refuses non-finite or negative values.
    pub fn set_limit(&mut self, limit: f64, deadband: f64) -> bool {
        if !(limit.is_finite() && deadband.is_finite() && deadband >= 0.0) {
            return false;
        }
        self.config.limit = limit;
        self.config.deadband = deadband;
        true
    }

    pub fn config(&self) -> &AlarmConfig {
        &self.config
    }
    pub fn state(&self) -> State {
        self.state
    }
    pub fn mode(&self) -> &Mode {
        &self.mode
    }
    /// The debounced condition.
    pub fn condition(&self) -> bool {
        self.condition
    }
    /// When the alarm was last raised or re-alarmed.
    pub fn last_annunciated_ms(&self) -> Option<i64> {
        self.last_annunciated_ms
    }

    /// What an operator sees: an alarm in the active mode that is unacknowledged,
    /// acknowledged, returned-to-normal unacknowledged or latched.
    pub fn annunciating(&self) -> bool {
        self.mode == Mode::Active && self.state != State::Normal
    }

    /// Takes one sample (`None` = bad or missing data).
    pub fn update(&mut self, value: Option<f64>, now_ms: i64) -> Vec<Event> {
        let now = self.clock(now_ms);
        let mut ev = Vec::new();
        self.expire_shelf(now, &mut ev);
        match value.filter(|v| v.is_finite()) {
            None => self.pending = None,
            Some(v) => {
                self.raw = self.raw_condition(v);
                if self.raw == self.condition {
                    self.pending = None;
                } else {
                    let p = self.pending.get_or_insert(Pending {
                        since_ms: now,
                        samples: 0,
                    });
                    p.samples = p.samples.saturating_add(1);
                    let p = *p;
                    let (delay_ms, delay_samples) = if self.raw {
                        (self.config.on_delay_ms, self.config.on_delay_samples)
                    } else {
                        (self.config.off_delay_ms, self.config.off_delay_samples)
                    };
                    if now.saturating_sub(p.since_ms) >= delay_ms && p.samples >= delay_samples {
                        self.pending = None;
                        self.set_condition(self.raw, now, &mut ev);
                    }
                }
            }
        }
        if let (Some(r), Some(acked), true, State::Acknowledged, true) = (
            self.config.realarm_ms,
            self.acknowledged_ms,
            self.condition,
            self.state,
            self.mode == Mode::Active,
        ) {
            if now.saturating_sub(acked) >= r {
                self.state = State::Unacknowledged;
                self.acknowledged_ms = None;
                self.last_annunciated_ms = Some(now);
                self.emit(&mut ev, now, EventKind::Realarmed);
            }
        }
        ev
    }

    pub fn snapshot(&self) -> AlarmSnapshot {
        AlarmSnapshot {
            state: self.state,
            mode: self.mode.clone(),
            raw: self.raw,
            condition: self.condition,
            acknowledged_ms: self.acknowledged_ms,
            last_annunciated_ms: self.last_annunciated_ms,
            latest_ms: self.latest_ms,
            seq: self.seq,
        }
    }

    /// Takes a saved state back. A state that cannot occur (latched without latching,
    /// a normal state with the condition on, acknowledged with it off) is refused.
    pub fn restore(&mut self, s: &AlarmSnapshot) -> bool {
        let consistent = match s.state {
            State::Latched => self.config.latched && !s.condition,
            State::Normal => !s.condition || s.mode != Mode::Active,
            State::Acknowledged | State::Unacknowledged => s.condition || s.mode != Mode::Active,
            State::ReturnedUnacknowledged => !s.condition,
        };
        if !consistent {
            return false;
        }
        self.state = s.state;
        self.mode = s.mode.clone();
        self.raw = s.raw;
        self.condition = s.condition;
        self.pending = None;
        self.acknowledged_ms = s.acknowledged_ms;
        self.last_annunciated_ms = s.last_annunciated_ms;
        self.latest_ms = s.latest_ms;
        self.seq = s.seq;
        true
    }

    /// Advances time without a sample: an expired shelf comes off (auto-unshelve).
    pub fn tick(&mut self, now_ms: i64) -> Vec<Event> {
        let now = self.clock(now_ms);
        let mut ev = Vec::new();
        self.expire_shelf(now, &mut ev);
        ev
    }

    /// Operator acknowledgement.
    pub fn acknowledge(&mut self, by: &str, now_ms: i64) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        let now = self.peek(now_ms);
        self.require_active(now)?;
        let next = match self.effective_state(now) {
            State::Normal => return Err(AlarmError::NothingToAcknowledge),
            State::Acknowledged | State::Latched => return Err(AlarmError::AlreadyAcknowledged),
            State::Unacknowledged => State::Acknowledged,
            State::ReturnedUnacknowledged if self.config.latched => State::Latched,
            State::ReturnedUnacknowledged => State::Normal,
        };
        let mut ev = self.begin(now);
        self.state = next;
        self.acknowledged_ms = (next == State::Acknowledged).then_some(now);
        self.emit(&mut ev, now, EventKind::Acknowledged { by: by.into() });
        Ok(ev)
    }

    /// Operator reset of a latched alarm (acknowledged, condition cleared).
    pub fn reset_latch(&mut self, by: &str, now_ms: i64) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        let now = self.peek(now_ms);
        self.require_active(now)?;
        let state = self.effective_state(now);
        if state != State::Latched {
            return Err(AlarmError::NoLatch(state.as_str()));
        }
        let mut ev = self.begin(now);
        self.state = State::Normal;
        self.emit(&mut ev, now, EventKind::LatchReset { by: by.into() });
        Ok(ev)
    }

    /// Shelves the alarm for `duration_ms` (more than 0, at most `max_shelve_ms`).
    pub fn shelve(
        &mut self,
        by: &str,
        reason: &str,
        duration_ms: i64,
        now_ms: i64,
    ) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        non_empty(reason, "reason")?;
        if duration_ms <= 0 || duration_ms > self.config.max_shelve_ms {
            return Err(AlarmError::ShelveDuration {
                got_ms: duration_ms,
                max_ms: self.config.max_shelve_ms,
            });
        }
        let now = self.peek(now_ms);
        self.require_active(now)?;
        let mut ev = self.begin(now);
        let until_ms = now.saturating_add(duration_ms);
        self.mode = Mode::Shelved {
            until_ms,
            by: by.into(),
            reason: reason.into(),
        };
        self.emit(
            &mut ev,
            now,
            EventKind::Shelved {
                by: by.into(),
                reason: reason.into(),
                until_ms,
            },
        );
        Ok(ev)
    }

    /// Operator unshelve. After the shelf has expired this reports the automatic
    /// unshelve instead of refusing.
    pub fn unshelve(&mut self, by: &str, now_ms: i64) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        let now = self.peek(now_ms);
        if !matches!(self.mode, Mode::Shelved { .. }) {
            return Err(AlarmError::NotShelved);
        }
        let mut ev = self.begin(now);
        if self.mode == Mode::Active {
            // The shelf had expired: `begin` reported the automatic unshelve.
            return Ok(ev);
        }
        self.mode = Mode::Active;
        self.emit(
            &mut ev,
            now,
            EventKind::Unshelved {
                auto: false,
                by: Some(by.into()),
            },
        );
        self.rederive(now, &mut ev);
        Ok(ev)
    }

    /// Suppression by design (plant-state logic).
    pub fn suppress_by_design(
        &mut self,
        reason: &str,
        now_ms: i64,
    ) -> Result<Vec<Event>, AlarmError> {
        non_empty(reason, "reason")?;
        let now = self.peek(now_ms);
        self.require_active(now)?;
        let mut ev = self.begin(now);
        self.kept = Some((self.state, self.acknowledged_ms));
        self.mode = Mode::SuppressedByDesign {
            reason: reason.into(),
        };
        self.emit(
            &mut ev,
            now,
            EventKind::Suppressed {
                reason: reason.into(),
            },
        );
        Ok(ev)
    }

    pub fn unsuppress(&mut self, now_ms: i64) -> Result<Vec<Event>, AlarmError> {
        let now = self.peek(now_ms);
        if !matches!(self.mode, Mode::SuppressedByDesign { .. }) {
            return Err(AlarmError::NotSuppressed);
        }
        let mut ev = self.begin(now);
        self.mode = Mode::Active;
        self.emit(&mut ev, now, EventKind::Unsuppressed);
        match self.kept.take() {
            // The condition did not change while suppressed: the state before it stands
            // (an alarm raised before is not raised again; an acknowledged one stays so).
            Some((state, acked)) => {
                self.state = state;
                self.acknowledged_ms = acked;
            }
            None => self.rederive(now, &mut ev),
        }
        Ok(ev)
    }

    pub fn remove_from_service(
        &mut self,
        by: &str,
        reason: &str,
        now_ms: i64,
    ) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        non_empty(reason, "reason")?;
        let now = self.peek(now_ms);
        self.require_active(now)?;
        let mut ev = self.begin(now);
        self.mode = Mode::OutOfService {
            by: by.into(),
            reason: reason.into(),
        };
        self.emit(
            &mut ev,
            now,
            EventKind::OutOfService {
                by: by.into(),
                reason: reason.into(),
            },
        );
        Ok(ev)
    }

    pub fn return_to_service(&mut self, by: &str, now_ms: i64) -> Result<Vec<Event>, AlarmError> {
        non_empty(by, "operator")?;
        let now = self.peek(now_ms);
        if !matches!(self.mode, Mode::OutOfService { .. }) {
            return Err(AlarmError::NotOutOfService);
        }
        let mut ev = self.begin(now);
        self.mode = Mode::Active;
        self.emit(&mut ev, now, EventKind::ReturnedToService { by: by.into() });
        self.rederive(now, &mut ev);
        Ok(ev)
    }

    // ---- internals ----

    /// The effective time without recording it (for checks before a refusal).
    fn peek(&self, now_ms: i64) -> i64 {
        now_ms.max(self.latest_ms)
    }

    /// Records the effective time.
    fn clock(&mut self, now_ms: i64) -> i64 {
        self.latest_ms = self.peek(now_ms);
        self.latest_ms
    }

    /// Starts an accepted call: records the time and expires the shelf.
    fn begin(&mut self, now: i64) -> Vec<Event> {
        self.clock(now);
        let mut ev = Vec::new();
        self.expire_shelf(now, &mut ev);
        ev
    }

    fn shelf_expired(&self, now: i64) -> bool {
        matches!(self.mode, Mode::Shelved { until_ms, .. } if now >= until_ms)
    }

    /// The state once an expired shelf has been taken off (see `rederive`).
    fn effective_state(&self, now: i64) -> State {
        if !self.shelf_expired(now) {
            self.state
        } else if self.condition {
            State::Unacknowledged
        } else if self.state == State::Latched {
            State::Latched
        } else {
            State::Normal
        }
    }

    /// Refuses unless the mode is active (or the shelf has expired by `now`).
    fn require_active(&self, now: i64) -> Result<(), AlarmError> {
        if self.mode == Mode::Active || self.shelf_expired(now) {
            Ok(())
        } else {
            Err(AlarmError::NotActive(self.mode.as_str()))
        }
    }

    fn expire_shelf(&mut self, now: i64, ev: &mut Vec<Event>) {
        if self.shelf_expired(now) {
            self.mode = Mode::Active;
            self.emit(
                ev,
                now,
                EventKind::Unshelved {
                    auto: true,
                    by: None,
                },
            );
            self.rederive(now, ev);
        }
    }

    /// On return to the active mode: an active condition is annunciated afresh.
    fn rederive(&mut self, now: i64, ev: &mut Vec<Event>) {
        self.acknowledged_ms = None;
        if self.condition {
            self.state = State::Unacknowledged;
            self.last_annunciated_ms = Some(now);
            self.emit(ev, now, EventKind::Raised);
        } else if self.state != State::Latched {
            self.state = State::Normal;
        }
    }

    /// The raw condition of one sample. Before the alarm is raised only a value past the
    /// limit counts (so the on-delay counts samples in alarm); once raised, it stays on
    /// until the value is back past the limit by the deadband (so the off-delay counts
    /// samples clear of the deadband).
    fn raw_condition(&self, v: f64) -> bool {
        let (limit, db) = (self.config.limit, self.config.deadband);
        match (self.config.direction, self.condition) {
            (Direction::High, false) => v > limit,
            (Direction::High, true) => v >= limit - db,
            (Direction::Low, false) => v < limit,
            (Direction::Low, true) => v <= limit + db,
        }
    }

    fn set_condition(&mut self, on: bool, now: i64, ev: &mut Vec<Event>) {
        self.condition = on;
        if self.mode != Mode::Active {
            self.kept = None;
            if on {
                self.state = State::Unacknowledged;
            } else if self.state != State::Latched {
                self.state = State::Normal;
            }
            self.acknowledged_ms = None;
            return;
        }
        if on {
            if matches!(
                self.state,
                State::Normal | State::ReturnedUnacknowledged | State::Latched
            ) {
                self.state = State::Unacknowledged;
                self.acknowledged_ms = None;
                self.last_annunciated_ms = Some(now);
                self.emit(ev, now, EventKind::Raised);
            }
        } else {
            let next = match self.state {
                State::Unacknowledged => State::ReturnedUnacknowledged,
                State::Acknowledged if self.config.latched => State::Latched,
                State::Acknowledged => State::Normal,
                other => other,
            };
            if next != self.state {
                self.state = next;
                self.acknowledged_ms = None;
                self.emit(ev, now, EventKind::Cleared);
            }
        }
    }

    fn emit(&mut self, ev: &mut Vec<Event>, at_ms: i64, kind: EventKind) {
        self.seq += 1;
        ev.push(Event {
            id: format!("{}#{}", self.config.id, self.seq),
            seq: self.seq,
            at_ms,
            kind,
        });
    }
}

fn non_empty(s: &str, what: &'static str) -> Result<(), AlarmError> {
    if s.trim().is_empty() {
        Err(AlarmError::Empty(what))
    } else {
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    /// Invented for the test: a high alarm at 10.0 with a 1.0 deadband and no delays.
    fn cfg() -> AlarmConfig {
        AlarmConfig {
            id: "r1.approach.high".into(),
            limit: 10.0,
            direction: Direction::High,
            deadband: 1.0,
            on_delay_ms: 0,
            off_delay_ms: 0,
            on_delay_samples: 0,
            off_delay_samples: 0,
            realarm_ms: None,
            latched: false,
            priority: Priority::P2,
            max_shelve_ms: 3_600_000,
        }
    }

    #[derive(Debug, Clone, Copy)]
    enum Step {
        V(f64),
        Bad,
        Ack,
        Reset,
        Shelve(i64),
        Unshelve,
        Suppress,
        Unsuppress,
        Oos,
        Rts,
    }

    fn apply(a: &mut Alarm, step: Step, t: i64) -> Result<Vec<Event>, AlarmError> {
        match step {
            Step::V(v) => Ok(a.update(Some(v), t)),
            Step::Bad => Ok(a.update(None, t)),
            Step::Ack => a.acknowledge("op1", t),
            Step::Reset => a.reset_latch("op1", t),
            Step::Shelve(d) => a.shelve("op1", "instrument check", d, t),
            Step::Unshelve => a.unshelve("op1", t),
            Step::Suppress => a.suppress_by_design("reactor bypassed", t),
            Step::Unsuppress => a.unsuppress(t),
            Step::Oos => a.remove_from_service("eng1", "analyser replaced", t),
            Step::Rts => a.return_to_service("eng1", t),
        }
    }

    fn name(k: &EventKind) -> &'static str {
        match k {
            EventKind::Raised => "raised",
            EventKind::Cleared => "cleared",
            EventKind::Acknowledged { .. } => "acknowledged",
            EventKind::Realarmed => "realarmed",
            EventKind::LatchReset { .. } => "latch_reset",
            EventKind::Shelved { .. } => "shelved",
            EventKind::Unshelved { auto: true, .. } => "unshelved_auto",
            EventKind::Unshelved { auto: false, .. } => "unshelved",
            EventKind::Suppressed { .. } => "suppressed",
            EventKind::Unsuppressed => "unsuppressed",
            EventKind::OutOfService { .. } => "out_of_service",
            EventKind::ReturnedToService { .. } => "returned_to_service",
        }
    }

    use State::Unacknowledged as U;
    use State::{Acknowledged as A, Latched as L, Normal as N, ReturnedUnacknowledged as R};
    const REFUSED: &[&str] = &["refused"];

    /// Runs the steps in order, each at its time, and checks after each one the event
    /// names (or `REFUSED`), the state and whether the alarm annunciates.
    fn check(config: AlarmConfig, steps: &[(i64, Step, &[&str], State, bool)]) {
        let mut a = Alarm::new(config).expect("valid config");
        for (i, (t, step, events, state, annunciating)) in steps.iter().enumerate() {
            let got: Vec<&str> = match apply(&mut a, *step, *t) {
                Ok(ev) => {
                    for e in &ev {
                        assert_eq!(e.at_ms, *t, "step {i} {step:?}: event time");
                    }
                    ev.iter().map(|e| name(&e.kind)).collect()
                }
                Err(_) => REFUSED.to_vec(),
            };
            assert_eq!(got, *events, "step {i} {step:?}: events");
            assert_eq!(a.state(), *state, "step {i} {step:?}: state");
            assert_eq!(
                a.annunciating(),
                *annunciating,
                "step {i} {step:?}: annunciating"
            );
        }
    }

    // All limits, values and times below are invented for the test.

    #[test]
    fn raise_acknowledge_clear_and_the_deadband() {
        check(
            cfg(),
            &[
                (0, Step::Ack, REFUSED, N, false),
                (0, Step::V(10.0), &[], N, false), // at the limit: not above it
                (1, Step::V(10.5), &["raised"], U, true),
                (2, Step::Ack, &["acknowledged"], A, true),
                (3, Step::Ack, REFUSED, A, true),
                (4, Step::V(9.5), &[], A, true), // inside the deadband
                (5, Step::V(9.0), &[], A, true), // at limit − deadband: still inside
                (6, Step::V(8.9), &["cleared"], N, false),
                (7, Step::V(9.9), &[], N, false), // inside the deadband: stays clear
                (8, Step::Reset, REFUSED, N, false),
            ],
        );
    }

    #[test]
    fn return_to_normal_unacknowledged_paths() {
        check(
            cfg(),
            &[
                (0, Step::V(12.0), &["raised"], U, true),
                (1, Step::V(5.0), &["cleared"], R, true),
                (2, Step::V(12.0), &["raised"], U, true),
                (3, Step::V(5.0), &["cleared"], R, true),
                (4, Step::Ack, &["acknowledged"], N, false),
                (5, Step::Ack, REFUSED, N, false),
            ],
        );
    }

    #[test]
    fn low_direction_is_mirrored() {
        let c = AlarmConfig {
            direction: Direction::Low,
            ..cfg()
        };
        check(
            c,
            &[
                (0, Step::V(11.0), &[], N, false),
                (1, Step::V(9.9), &["raised"], U, true),
                (2, Step::V(10.9), &[], U, true), // inside the deadband
                (3, Step::V(11.1), &["cleared"], R, true),
                (4, Step::Ack, &["acknowledged"], N, false),
            ],
        );
    }

    #[test]
    fn latched_alarm_needs_acknowledge_and_reset() {
        let c = AlarmConfig {
            latched: true,
            ..cfg()
        };
        check(
            c,
            &[
                (0, Step::V(12.0), &["raised"], U, true),
                (1, Step::Reset, REFUSED, U, true),
                (2, Step::Ack, &["acknowledged"], A, true),
                (3, Step::Reset, REFUSED, A, true), // condition still active
                (4, Step::V(5.0), &["cleared"], L, true),
                (5, Step::Ack, REFUSED, L, true),
                (6, Step::Reset, &["latch_reset"], N, false),
                // Clearing before acknowledgement: acknowledgement latches.
                (7, Step::V(12.0), &["raised"], U, true),
                (8, Step::V(5.0), &["cleared"], R, true),
                (9, Step::Ack, &["acknowledged"], L, true),
                // The condition returning while latched raises again.
                (10, Step::V(12.0), &["raised"], U, true),
                (11, Step::Ack, &["acknowledged"], A, true),
                (12, Step::V(5.0), &["cleared"], L, true),
                (13, Step::Reset, &["latch_reset"], N, false),
            ],
        );
    }

    #[test]
    fn realarm_after_the_configured_time() {
        let c = AlarmConfig {
            realarm_ms: Some(60_000),
            ..cfg()
        };
        check(
            c,
            &[
                (0, Step::V(12.0), &["raised"], U, true),
                (1_000, Step::Ack, &["acknowledged"], A, true),
                (60_999, Step::V(12.0), &[], A, true),
                (61_000, Step::Bad, &["realarmed"], U, true),
                (62_000, Step::Ack, &["acknowledged"], A, true),
                (70_000, Step::V(5.0), &["cleared"], N, false),
                (200_000, Step::V(5.0), &[], N, false),
            ],
        );
    }

    #[test]
    fn on_delay_counts_only_samples_past_the_limit() {
        // The reported fault: limit 20 K, deadband 1 K, on-delay 2 samples; 20.5 then 19.44
        // (inside the deadband) raised with value 19.44. Now the sample inside the deadband
        // breaks the count, and the raise waits for two samples past the limit.
        let c = AlarmConfig {
            limit: 20.0,
            deadband: 1.0,
            on_delay_samples: 2,
            ..cfg()
        };
        check(
            c,
            &[
                (1, Step::V(20.5), &[], N, false),
                (2, Step::V(19.44), &[], N, false), // inside the deadband: not past the limit
                (3, Step::V(20.3), &[], N, false),
                (4, Step::V(20.2), &["raised"], U, true),
                (5, Step::V(19.44), &[], U, true), // inside the deadband: stays raised
                (6, Step::V(18.9), &["cleared"], R, true),
            ],
        );
    }

    #[test]
    fn on_and_off_delays_need_time_and_samples() {
        let c = AlarmConfig {
            on_delay_ms: 30_000,
            on_delay_samples: 4,
            off_delay_ms: 10_000,
            off_delay_samples: 2,
            ..cfg()
        };
        check(
            c,
            &[
                (0, Step::V(11.0), &[], N, false),
                (10_000, Step::V(11.0), &[], N, false),
                (20_000, Step::V(11.0), &[], N, false),
                (30_000, Step::V(11.0), &["raised"], U, true), // 30 s and 4 samples
                (40_000, Step::V(5.0), &[], U, true),
                (45_000, Step::V(5.0), &[], U, true), // 2 samples but 5 s
                (47_000, Step::Bad, &[], U, true),    // bad data breaks the run
                (50_000, Step::V(5.0), &[], U, true),
                (59_999, Step::V(5.0), &[], U, true),
                (60_000, Step::V(5.0), &["cleared"], R, true),
                // Time alone is not enough: one sample after a long gap.
                (200_000, Step::V(11.0), &[], R, true),
                (200_001, Step::V(5.0), &[], R, true),
            ],
        );
        let by_samples = AlarmConfig {
            on_delay_samples: 3,
            ..cfg()
        };
        check(
            by_samples,
            &[
                (0, Step::V(11.0), &[], N, false),
                (1, Step::V(11.0), &[], N, false),
                (2, Step::V(5.0), &[], N, false),
                (3, Step::V(11.0), &[], N, false),
                (4, Step::V(11.0), &[], N, false),
                (5, Step::V(11.0), &["raised"], U, true),
            ],
        );
    }

    #[test]
    fn shelving_hides_tracks_and_expires() {
        check(
            cfg(),
            &[
                (0, Step::V(12.0), &["raised"], U, true),
                (1_000, Step::Shelve(0), REFUSED, U, true),
                (1_000, Step::Shelve(3_600_001), REFUSED, U, true),
                (1_000, Step::Shelve(60_000), &["shelved"], U, false),
                (1_500, Step::Shelve(60_000), REFUSED, U, false),
                (2_000, Step::Ack, REFUSED, U, false),
                (3_000, Step::V(5.0), &[], N, false), // tracked silently
                (4_000, Step::V(12.0), &[], U, false),
                (60_999, Step::V(12.0), &[], U, false),
                (
                    61_000,
                    Step::V(12.0),
                    &["unshelved_auto", "raised"],
                    U,
                    true,
                ),
                (62_000, Step::Ack, &["acknowledged"], A, true),
                (63_000, Step::Shelve(10_000), &["shelved"], A, false),
                (64_000, Step::Unshelve, &["unshelved", "raised"], U, true),
                (65_000, Step::Unshelve, REFUSED, U, true),
                (66_000, Step::V(5.0), &["cleared"], R, true),
                (67_000, Step::Shelve(10_000), &["shelved"], R, false),
                // After expiry an acknowledgement sees the state the expiry will give (normal).
                (77_000, Step::Ack, REFUSED, R, false), // refused, nothing changed
                (77_000, Step::Bad, &["unshelved_auto"], N, false),
            ],
        );
    }

    #[test]
    fn manual_unshelve_after_expiry_reports_the_automatic_one() {
        check(
            cfg(),
            &[
                (0, Step::Shelve(1_000), &["shelved"], N, false),
                (5_000, Step::Unshelve, &["unshelved_auto"], N, false),
            ],
        );
    }

    #[test]
    fn suppression_and_out_of_service_hide_but_keep_state() {
        check(
            cfg(),
            &[
                (0, Step::Unsuppress, REFUSED, N, false),
                (0, Step::Suppress, &["suppressed"], N, false),
                (1, Step::Oos, REFUSED, N, false),
                (2, Step::V(12.0), &[], U, false),
                (3, Step::Ack, REFUSED, U, false),
                (4, Step::Unsuppress, &["unsuppressed", "raised"], U, true),
                (5, Step::Rts, REFUSED, U, true),
                (6, Step::Oos, &["out_of_service"], U, false),
                (7, Step::V(5.0), &[], N, false),
                (8, Step::Rts, &["returned_to_service"], N, false),
                (9, Step::V(12.0), &["raised"], U, true),
            ],
        );
        // A latch survives a hidden period.
        let c = AlarmConfig {
            latched: true,
            ..cfg()
        };
        check(
            c,
            &[
                (0, Step::V(12.0), &["raised"], U, true),
                (1, Step::Ack, &["acknowledged"], A, true),
                (2, Step::V(5.0), &["cleared"], L, true),
                (3, Step::Oos, &["out_of_service"], L, false),
                (4, Step::Reset, REFUSED, L, false),
                (5, Step::Rts, &["returned_to_service"], L, true),
                (6, Step::Reset, &["latch_reset"], N, false),
            ],
        );
    }

    #[test]
    fn events_have_stable_sequential_ids_and_time_never_runs_back() {
        let mut a = Alarm::new(cfg()).expect("valid");
        let mut ev = a.update(Some(12.0), 10_000);
        ev.extend(a.acknowledge("op1", 5_000).expect("ack")); // earlier time: taken as 10 000
        let ids: Vec<&str> = ev.iter().map(|e| e.id.as_str()).collect();
        assert_eq!(ids, ["r1.approach.high#1", "r1.approach.high#2"]);
        assert_eq!(ev[1].at_ms, 10_000);
        assert_eq!(ev[1].kind, EventKind::Acknowledged { by: "op1".into() });
        assert_eq!(a.last_annunciated_ms(), Some(10_000));
        // Non-finite values are bad data.
        assert!(a.update(Some(f64::NAN), 11_000).is_empty());
        assert!(a.condition());
    }

    #[test]
    fn configuration_and_arguments_are_validated() {
        let bad = [
            AlarmConfig {
                id: " ".into(),
                ..cfg()
            },
            AlarmConfig {
                limit: f64::NAN,
                ..cfg()
            },
            AlarmConfig {
                deadband: -0.1,
                ..cfg()
            },
            AlarmConfig {
                on_delay_ms: -1,
                ..cfg()
            },
            AlarmConfig {
                off_delay_ms: -1,
                ..cfg()
            },
            AlarmConfig {
                realarm_ms: Some(0),
                ..cfg()
            },
            AlarmConfig {
                max_shelve_ms: 0,
                ..cfg()
            },
        ];
        for c in bad {
            let e = Alarm::new(c.clone()).expect_err("invalid config");
            let msg = e.to_string();
            assert!(msg.starts_with(|ch: char| ch.is_lowercase()), "{msg}");
        }
        let mut a = Alarm::new(cfg()).expect("valid");
        a.update(Some(12.0), 0);
        assert_eq!(a.acknowledge("", 1), Err(AlarmError::Empty("operator")));
        assert_eq!(
            a.shelve("op1", " ", 1_000, 1),
            Err(AlarmError::Empty("reason"))
        );
        assert_eq!(
            a.shelve("op1", "check", -5, 1),
            Err(AlarmError::ShelveDuration {
                got_ms: -5,
                max_ms: 3_600_000
            })
        );
        assert_eq!(a.state(), State::Unacknowledged);
        assert_eq!(a.mode(), &Mode::Active);
    }

    /// Values around the invented limit 10.0 and deadband 1.0.
    fn values() -> impl Strategy<Value = Vec<(i64, Option<f64>)>> {
        prop::collection::vec(
            (1i64..20_000, prop::option::weighted(0.8, 5.0f64..15.0)),
            1..80,
        )
    }

    /// Gaps to absolute times starting at an invented 0.
    fn timed(steps: &[(i64, Option<f64>)]) -> Vec<(i64, Option<f64>)> {
        let mut t = 0;
        steps
            .iter()
            .map(|(gap, v)| {
                t += gap;
                (t, *v)
            })
            .collect()
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(256))]

        /// Once raised, no value inside the deadband (or above the limit) clears it.
        #[test]
        fn nothing_clears_inside_the_deadband(
            high in any::<bool>(),
            db in 0.0f64..5.0,
            frac in prop::collection::vec(0.0f64..=1.0, 1..60),
        ) {
            let c = AlarmConfig {
                direction: if high { Direction::High } else { Direction::Low },
                deadband: db,
                ..cfg()
            };
            let mut a = Alarm::new(c).expect("valid");
            let start = if high { 11.0 } else { 9.0 };
            a.update(Some(start), 0);
            prop_assert!(a.condition());
            for (i, f) in frac.iter().enumerate() {
                let v = if high { 10.0 - db * f } else { 10.0 + db * f };
                let ev = a.update(Some(v), i64::try_from(i).unwrap_or(0) + 1);
                prop_assert!(a.condition());
                prop_assert!(!ev.iter().any(|e| e.kind == EventKind::Cleared));
            }
        }

        /// A shelved alarm never annunciates and unshelves at the first call at or after expiry.
        #[test]
        fn shelved_never_annunciates_and_expires(
            steps in values(),
            shelve_at in 0usize..40,
            duration in 1i64..200_000,
        ) {
            let mut a = Alarm::new(cfg()).expect("valid");
            let steps = timed(&steps);
            let mut until = None;
            for (i, (t, v)) in steps.iter().enumerate() {
                if i == shelve_at {
                    a.shelve("op1", "nuisance", duration, *t).expect("shelve");
                    until = Some(t + duration);
                }
                let ev = a.update(*v, *t);
                match until {
                    Some(u) if *t < u => {
                        prop_assert!(!a.annunciating());
                        let shelved = matches!(a.mode(), Mode::Shelved { .. });
                        prop_assert!(shelved);
                        prop_assert!(ev.is_empty());
                    }
                    Some(_) => {
                        let auto = EventKind::Unshelved { auto: true, by: None };
                        let first = ev.first().map(|e| &e.kind);
                        prop_assert_eq!(first, Some(&auto));
                        prop_assert_eq!(a.mode(), &Mode::Active);
                        // Shown afresh: an active condition is unacknowledged again.
                        if a.condition() {
                            prop_assert_eq!(a.state(), State::Unacknowledged);
                        }
                        until = None;
                    }
                    None => {}
                }
            }
        }

        /// Suppressed by design: the condition is tracked as without suppression, the
        /// state stays consistent with it, and nothing annunciates.
        #[test]
        fn suppressed_keeps_state_and_never_annunciates(
            steps in values(),
            suppress_at in 0usize..40,
            on_delay in 0i64..30_000,
        ) {
            let c = AlarmConfig { on_delay_ms: on_delay, off_delay_samples: 2, ..cfg() };
            let mut a = Alarm::new(c.clone()).expect("valid");
            let mut twin = Alarm::new(c).expect("valid");
            let mut suppressed = false;
            for (i, (t, v)) in timed(&steps).iter().enumerate() {
                if i == suppress_at {
                    a.suppress_by_design("start-up", *t).expect("suppress");
                    suppressed = true;
                }
                let ev = a.update(*v, *t);
                twin.update(*v, *t);
                prop_assert_eq!(a.condition(), twin.condition());
                if suppressed {
                    prop_assert!(!a.annunciating());
                    prop_assert!(ev.is_empty());
                    let up = matches!(a.state(), State::Unacknowledged | State::Acknowledged);
                    prop_assert_eq!(up, a.condition());
                }
            }
        }

        /// The on-delay never raises for a raw condition held for less than the delay.
        #[test]
        fn on_delay_filters_short_conditions(
            steps in prop::collection::vec((1i64..20_000, any::<bool>()), 1..80),
            delay_ms in 0i64..60_000,
            delay_samples in 0u32..5,
        ) {
            let c = AlarmConfig { on_delay_ms: delay_ms, on_delay_samples: delay_samples, deadband: 0.0, ..cfg() };
            let mut a = Alarm::new(c).expect("valid");
            let mut run: Option<(i64, u32)> = None;
            let mut t = 0;
            for (gap, high) in steps {
                t += gap;
                run = if high {
                    run.map(|(s, n)| (s, n + 1)).or(Some((t, 1)))
                } else {
                    None
                };
                let ev = a.update(Some(if high { 11.0 } else { 9.0 }), t);
                if ev.iter().any(|e| e.kind == EventKind::Raised) {
                    let (since, n) = run.unwrap_or((t, 0));
                    prop_assert!(t - since >= delay_ms, "raised after {} ms", t - since);
                    prop_assert!(n >= delay_samples, "raised after {} samples", n);
                }
            }
        }

        /// A raise (or re-raise) only ever happens on a sample past the limit, and every
        /// sample the on-delay counted was past the limit too, for any delay and deadband
        /// (ISA-18.2: the on-delay counts samples in alarm; the deadband only governs the
        /// clear; docs/domain.md §10, common practice).
        #[test]
        fn raised_value_is_always_past_the_limit(
            steps in values(),
            delay_ms in 0i64..60_000,
            delay_samples in 0u32..6,
            db in 0.0f64..4.0,
            low in any::<bool>(),
        ) {
            let direction = if low { Direction::Low } else { Direction::High };
            let c = AlarmConfig {
                on_delay_ms: delay_ms,
                on_delay_samples: delay_samples,
                deadband: db,
                direction,
                ..cfg()
            };
            let past = |v: f64| if low { v < 10.0 } else { v > 10.0 };
            let mut a = Alarm::new(c).expect("valid");
            // Consecutive good samples past the limit, and since when.
            let mut run: Option<(i64, u32)> = None;
            for (t, v) in timed(&steps) {
                run = match v {
                    Some(x) if past(x) => run.map(|(s, n)| (s, n + 1)).or(Some((t, 1))),
                    _ => None,
                };
                let ev = a.update(v, t);
                if ev.iter().any(|e| e.kind == EventKind::Raised) {
                    let x = v.expect("a raise needs a value");
                    prop_assert!(past(x), "raised on {} (limit 10, deadband {})", x, db);
                    let (since, n) = run.expect("a run past the limit");
                    prop_assert!(t - since >= delay_ms, "raised after {} ms past the limit", t - since);
                    prop_assert!(n >= delay_samples.max(1), "raised after {} samples past the limit", n);
                }
            }
        }

        /// Bad data never changes the condition and never raises.
        #[test]
        fn none_never_raises(steps in values(), realarm in prop::option::of(1i64..50_000)) {
            let c = AlarmConfig { realarm_ms: realarm, ..cfg() };
            let mut a = Alarm::new(c).expect("valid");
            for (t, v) in timed(&steps) {
                let before = a.condition();
                let ev = a.update(v, t);
                if v.is_none() {
                    prop_assert_eq!(a.condition(), before);
                    prop_assert!(!ev.iter().any(|e| e.kind == EventKind::Raised));
                }
            }
            // Only bad data from the start: never raises.
            let mut fresh = Alarm::new(cfg()).expect("valid");
            for (t, _) in timed(&steps) {
                prop_assert!(fresh.update(None, t).is_empty());
                prop_assert!(!fresh.annunciating());
            }
        }
    }

    #[test]
    fn a_saved_state_restores_and_an_impossible_one_is_refused() {
        // Invented sequence: raise, acknowledge, shelve for 1 h; a fresh alarm takes the
        // snapshot and behaves the same (auto-unshelve at expiry, raised afresh).
        let mut a = Alarm::new(cfg()).unwrap();
        a.update(Some(12.0), 0);
        a.acknowledge("op", 10).unwrap();
        a.shelve("op", "work", 3_600_000, 20).unwrap();
        let snap = a.snapshot();
        let mut b = Alarm::new(cfg()).unwrap();
        assert!(b.restore(&snap));
        assert_eq!(b.snapshot(), snap);
        assert!(!b.annunciating());
        assert!(b.update(Some(12.0), 1_000).is_empty());
        let ev = b.tick(3_600_020);
        assert!(matches!(
            ev[0].kind,
            EventKind::Unshelved { auto: true, .. }
        ));
        assert_eq!(b.state(), State::Unacknowledged);
        // Latched without latching configured, or normal with the condition on: refused.
        let mut bad = snap.clone();
        bad.state = State::Latched;
        bad.condition = false;
        assert!(!Alarm::new(cfg()).unwrap().restore(&bad));
        let mut bad = snap;
        bad.mode = Mode::Active;
        bad.state = State::Normal;
        bad.condition = true;
        assert!(!Alarm::new(cfg()).unwrap().restore(&bad));
    }
}

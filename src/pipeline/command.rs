//! Operator commands on a lane: read the message, check the sender against the allow
//! list, carry the command out on the watch, and answer with an outcome record
//! (journaled and published like every other record). Each step ends in a typed
//! [`Verdict`]; the outcome message and the metrics label come from it.

use std::sync::Arc;
use std::sync::atomic::Ordering::Relaxed;

use tracing::{info, warn};

use super::Append;
use super::lane::{Lane, Sink};
use crate::monitor::watch::WatchEvent;
use crate::wire::watch::{self as wp, Command, Outcome, Sender, Verdict};

/// A command's answer before it is encoded.
struct Answer {
    sender: Sender,
    command: Option<&'static str>,
    alarm: Option<String>,
    verdict: Verdict,
    message: String,
}

impl Lane {
    /// A command message: checked against the allow list, carried out, answered with an
    /// outcome record, then the records of what it changed. Returns the verdict (also
    /// counted in the metrics and published).
    pub fn command(&mut self, payload: &[u8], now_ms: i64, sink: &mut Sink) -> Verdict {
        let (answer, changed) = match wp::decode_command(payload) {
            Err(p) => {
                warn!(reactor = %self.id(), error = %p.message, "command invalid");
                let answer = Answer {
                    sender: p.sender,
                    command: None,
                    alarm: None,
                    verdict: Verdict::Invalid,
                    message: p.message,
                };
                (answer, None)
            }
            Ok(c) => self.carry_out(c, now_ms),
        };
        self.answer(&answer, now_ms, sink);
        match changed {
            Some(events) if events.is_empty() => sink.records.push(self.states(now_ms)),
            Some(events) => self.publish_events(events, now_ms, sink),
            None => {}
        }
        answer.verdict
    }

    /// Checks the sender, then asks the watch. An accepted command comes back with the
    /// events it caused (possibly none: the retained states are republished anyway).
    fn carry_out(&mut self, c: Command, now_ms: i64) -> (Answer, Option<Vec<WatchEvent>>) {
        let name = c.action.as_str();
        let mut answer = Answer {
            command: Some(name),
            alarm: c.alarm.clone(),
            verdict: Verdict::NotAllowed,
            message: String::new(),
            sender: c.sender,
        };
        let settings = Arc::clone(&self.settings);
        let sender = &answer.sender;
        if !settings
            .commands
            .allows(sender.user.as_deref(), sender.client_id.as_deref())
        {
            let user = sender.user.as_deref().unwrap_or("(none)");
            let client = sender.client_id.as_deref().unwrap_or("(none)");
            warn!(reactor = %self.id(), command = %name, user = %user, client_id = %client, "command refused: not allowed");
            answer.message = format!(
                "user {user:?} / client id {client:?} may not send commands (commands.allowed_users, commands.allowed_clients)"
            );
            return (answer, None);
        }
        let by = sender.name().to_string();
        let alarm = c.alarm.as_deref();
        let spec = &settings.reactors[self.reactor()].spec;
        match self
            .watch
            .command(&spec.watch, &c.action, alarm, &by, now_ms)
        {
            Ok((message, events)) => {
                info!(reactor = %spec.id, command = %name, alarm = %alarm.unwrap_or("-"), by = %by, "command carried out");
                answer.verdict = Verdict::Accepted;
                answer.message = message;
                (answer, Some(events))
            }
            Err(e) => {
                answer.message = e.to_string();
                warn!(reactor = %spec.id, command = %name, alarm = %alarm.unwrap_or("-"), by = %by, error = %answer.message, "command refused");
                answer.verdict = Verdict::Refused;
                (answer, None)
            }
        }
    }

    /// Counts the verdict and records the outcome message.
    fn answer(&self, a: &Answer, now_ms: i64, sink: &mut Sink) {
        self.metrics.commands[a.verdict.index()].fetch_add(1, Relaxed);
        sink.records.push(Append {
            topic: self.topics.outcome.clone(),
            retain: false,
            point: None,
            payload: wp::encode_outcome(&Outcome {
                reactor: self.id(),
                sender: &a.sender,
                command: a.command,
                alarm: a.alarm.as_deref(),
                verdict: a.verdict,
                message: &a.message,
                at_ms: now_ms,
            }),
        });
    }
}

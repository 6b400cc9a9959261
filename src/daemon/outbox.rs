//! Delivery bookkeeping between the journal and the MQTT client: which journal records
//! wait, which were handed to the client, which the broker acknowledged, and the
//! "published" watermark below which everything is acknowledged.
//!
//! Records are taken strictly in sequence order; a gap (records held only on disk
//! because the daemon restarted, or memory was full while the broker was away) is
//! filled by asking the journal to read it back. After a connection loss without a
//! session, everything handed but not acknowledged goes back to the front of the
//! queue, so it is sent again in order. Plain data, no runtime: driven by the MQTT task.

use std::collections::{BTreeSet, HashMap, VecDeque};

/// A journal record on its way to the broker.
#[derive(Debug, Clone, PartialEq)]
pub struct Outgoing {
    pub seq: u64,
    pub ts_ms: i64,
    pub topic: String,
    pub retain: bool,
    pub payload: String,
    /// Read back from disk (after a restart or a spill), so certainly late.
    pub replayed: bool,
}

/// What [`Outbox::offer`] did with a record.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Offer {
    Accepted,
    /// Already queued, handed or acknowledged.
    Duplicate,
    /// Not taken: the queue is full or records before it are missing; the caller should
    /// read the journal from `after` (exclusive) when [`Outbox::wants_read`] says so.
    Deferred,
}

#[derive(Debug)]
pub struct Outbox {
    queue: VecDeque<Outgoing>,
    handed: VecDeque<Outgoing>,
    /// Sequences handed, waiting for the client's packet id (0 = an untracked publish).
    awaiting_pkid: VecDeque<u64>,
    by_pkid: HashMap<u16, u64>,
    acked_ahead: BTreeSet<u64>,
    /// Ranges (first, last) the journal no longer holds (deleted by its size cap before
    /// they were published): nothing will ever acknowledge them, so the watermark steps
    /// over them.
    lost: VecDeque<(u64, u64)>,
    watermark: u64,
    next_expected: u64,
    capacity: usize,
    read_pending: bool,
    /// Newest sequence known to exist in the journal.
    journal_last: u64,
}

impl Outbox {
    /// `published` is the journal's acknowledged watermark at start; `capacity` bounds
    /// the records held in memory.
    pub fn new(published: u64, capacity: usize) -> Self {
        Self {
            queue: VecDeque::new(),
            handed: VecDeque::new(),
            awaiting_pkid: VecDeque::new(),
            by_pkid: HashMap::new(),
            acked_ahead: BTreeSet::new(),
            lost: VecDeque::new(),
            watermark: published,
            next_expected: published + 1,
            capacity: capacity.max(1),
            read_pending: false,
            journal_last: published,
        }
    }

    pub fn watermark(&self) -> u64 {
        self.watermark
    }

    pub fn queued(&self) -> usize {
        self.queue.len()
    }

    pub fn in_flight(&self) -> usize {
        self.handed.len()
    }

    /// Records known to the journal and not yet acknowledged.
    pub fn backlog(&self) -> u64 {
        self.journal_last.saturating_sub(self.watermark)
    }

    /// Tells the outbox how far the journal goes (for gap detection at start).
    pub fn journal_at(&mut self, last_seq: u64) {
        self.journal_last = self.journal_last.max(last_seq);
    }

    pub fn offer(&mut self, r: Outgoing) -> Offer {
        self.journal_last = self.journal_last.max(r.seq);
        if r.seq < self.next_expected {
            return Offer::Duplicate;
        }
        if self.queue.len() >= self.capacity {
            return Offer::Deferred;
        }
        if r.seq > self.next_expected {
            if !r.replayed {
                return Offer::Deferred;
            }
            // Read back from the journal after `next_expected - 1`: the journal returns its
            // records in order, so the ones before this are no longer on disk (its size
            // cap deleted them). Waiting for them would ask for the same read forever.
            self.lost.push_back((self.next_expected, r.seq - 1));
            self.advance();
        }
        self.next_expected = r.seq + 1;
        self.queue.push_back(r);
        Offer::Accepted
    }

    /// `Some(after)` when the journal should be read from `after` (exclusive): records
    /// exist on disk that memory does not hold, and there is room for them.
    pub fn wants_read(&mut self) -> Option<u64> {
        if self.read_pending
            || self.journal_last < self.next_expected
            || self.queue.len() * 2 > self.capacity
        {
            return None;
        }
        self.read_pending = true;
        Some(self.next_expected - 1)
    }

    /// The journal read finished (whatever it returned was offered).
    pub fn read_done(&mut self) {
        self.read_pending = false;
    }

    /// The next record to hand to the client, if the in-flight window allows.
    pub fn next(&self, max_in_flight: usize) -> Option<&Outgoing> {
        if self.handed.len() >= max_in_flight {
            return None;
        }
        self.queue.front()
    }

    /// The front record was handed to the client.
    pub fn handed_front(&mut self) {
        if let Some(r) = self.queue.pop_front() {
            self.awaiting_pkid.push_back(r.seq);
            self.handed.push_back(r);
        }
    }

    /// A publish outside the journal (status) was handed: keeps packet ids in step.
    pub fn handed_untracked(&mut self) {
        self.awaiting_pkid.push_back(0);
    }

    /// The client wrote a publish with this packet id (in hand-over order). A packet id
    /// already mapped is a retransmission of a resumed session.
    pub fn on_outgoing(&mut self, pkid: u16) {
        if self.by_pkid.contains_key(&pkid) {
            return;
        }
        if let Some(seq) = self.awaiting_pkid.pop_front()
            && seq != 0
        {
            self.by_pkid.insert(pkid, seq);
        }
    }

    /// The broker acknowledged `pkid`. Returns the new watermark when it moved.
    pub fn on_ack(&mut self, pkid: u16) -> Option<u64> {
        let seq = self.by_pkid.remove(&pkid)?;
        if let Some(i) = self.handed.iter().position(|r| r.seq == seq) {
            self.handed.remove(i);
        }
        if seq <= self.watermark {
            return None;
        }
        self.acked_ahead.insert(seq);
        let before = self.watermark;
        self.advance();
        (self.watermark != before).then_some(self.watermark)
    }

    /// Moves the watermark over everything acknowledged or lost just above it.
    fn advance(&mut self) {
        loop {
            if self.acked_ahead.remove(&(self.watermark + 1)) {
                self.watermark += 1;
                continue;
            }
            match self.lost.front() {
                Some(&(first, last)) if first <= self.watermark + 1 => {
                    self.watermark = self.watermark.max(last);
                    self.lost.pop_front();
                }
                _ => break,
            }
        }
    }

    /// The connection came back without the old session: what was handed and not
    /// acknowledged goes back to the front of the queue, in order.
    pub fn on_new_session(&mut self) {
        self.awaiting_pkid.clear();
        self.by_pkid.clear();
        while let Some(r) = self.handed.pop_back() {
            self.queue.push_front(r);
        }
    }
}

/// A retained record `seq` on topic `t` with an empty object, for tests here and of the
/// result link.
#[cfg(test)]
pub(super) fn rec(seq: u64) -> Outgoing {
    Outgoing {
        seq,
        ts_ms: 0,
        topic: "t".into(),
        retain: true,
        payload: "{}".into(),
        replayed: false,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn send_all(o: &mut Outbox, window: usize) -> Vec<u64> {
        let mut sent = Vec::new();
        while let Some(r) = o.next(window) {
            sent.push(r.seq);
            o.handed_front();
        }
        sent
    }

    #[test]
    fn in_order_with_acks_out_of_order() {
        let mut o = Outbox::new(0, 100);
        for s in 1..=4 {
            assert_eq!(o.offer(rec(s)), Offer::Accepted);
        }
        assert_eq!(o.offer(rec(2)), Offer::Duplicate);
        assert_eq!(send_all(&mut o, 3), vec![1, 2, 3]);
        o.handed_untracked(); // a status publish between them
        for pkid in [1, 2, 3, 4] {
            o.on_outgoing(pkid);
        }
        assert_eq!(o.on_ack(2), None); // 2 before 1: watermark waits
        assert_eq!(o.on_ack(1), Some(2));
        assert_eq!(o.on_ack(4), None); // the untracked status publish
        assert_eq!(o.on_ack(3), Some(3));
        assert_eq!(send_all(&mut o, 3), vec![4]);
    }

    #[test]
    fn new_session_resends_unacknowledged_in_order() {
        let mut o = Outbox::new(10, 100);
        for s in 11..=15 {
            o.offer(rec(s));
        }
        assert_eq!(send_all(&mut o, 3), vec![11, 12, 13]);
        for pkid in [7, 8, 9] {
            o.on_outgoing(pkid);
        }
        assert_eq!(o.on_ack(7), Some(11));
        o.on_new_session();
        assert_eq!(send_all(&mut o, 10), vec![12, 13, 14, 15]);
    }

    #[test]
    fn records_the_journal_no_longer_holds_are_stepped_over() {
        // 1..=2 published; 3..=6 were deleted by the journal's size cap before they went
        // out, so a read after 2 returns 7 first.
        let mut o = Outbox::new(2, 100);
        o.journal_at(8);
        assert_eq!(o.wants_read(), Some(2));
        let replayed = |s| Outgoing {
            replayed: true,
            ..rec(s)
        };
        assert_eq!(o.offer(replayed(7)), Offer::Accepted);
        assert_eq!(o.offer(replayed(8)), Offer::Accepted);
        o.read_done();
        assert_eq!(o.wants_read(), None, "nothing more to read");
        assert_eq!(o.watermark(), 6, "the lost range counts as done");
        assert_eq!(send_all(&mut o, 10), vec![7, 8]);
        o.on_outgoing(1);
        o.on_outgoing(2);
        assert_eq!(o.on_ack(2), None);
        assert_eq!(o.on_ack(1), Some(8));
        // A live record past a gap still waits for the read (the gap is on disk).
        assert_eq!(o.offer(rec(10)), Offer::Deferred);
    }

    #[test]
    fn gaps_and_capacity_are_filled_from_the_journal() {
        // Restart: the journal holds 6..=9 unpublished; live records start at 10.
        let mut o = Outbox::new(5, 4);
        o.journal_at(9);
        assert_eq!(o.offer(rec(10)), Offer::Deferred);
        assert_eq!(o.wants_read(), Some(5));
        assert_eq!(o.wants_read(), None, "one read at a time");
        for s in 6..=9 {
            assert_eq!(o.offer(rec(s)), Offer::Accepted);
        }
        assert_eq!(o.offer(rec(10)), Offer::Deferred, "memory full");
        o.read_done();
        assert_eq!(o.wants_read(), None, "no room yet");
        assert_eq!(send_all(&mut o, 10), vec![6, 7, 8, 9]);
        assert_eq!(o.wants_read(), Some(9));
        assert_eq!(o.offer(rec(10)), Offer::Accepted);
    }
}

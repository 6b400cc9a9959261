//! The on-disk journal: a JSON Lines log of everything the daemon publishes, written
//! before a message is offered to the broker and replayed after broker outages and
//! restarts (store and forward), so nothing accepted is lost.
//!
//! Layout of the journal directory:
//! - `eqwatch-YYYYMMDD-<first seq, 12 digits>.jsonl`: segments, one JSON object a line:
//!   `{"seq":N,"ts_ms":T,"topic":"...","retain":B,"payload":{...}}`. The date is the UTC
//!   day of the first record; the sequence number is that of the first record, so a
//!   segment's range ends just before the next segment's first sequence number.
//! - `published.seq`: the broker-acknowledged cursor (decimal text).
//! - `last.seq`: the highest sequence number handed out, so numbers never repeat even
//!   when every segment is gone.
//!
//! Both cursor files are replaced atomically (temporary file, fsync, rename).
//!
//! A full or unwritable disk: records that cannot be written keep their sequence
//! numbers and are held in memory (at most `journal.memory_max_bytes`, oldest dropped
//! and counted beyond it), go to the broker as usual, and are served by
//! [`Journal::read_after`] like records on disk. While any are held nothing new is
//! written (order on disk stays the sequence order); [`Journal::retry_held`] tries to
//! write them again, oldest first, at most once per [`RETRY_MS`]. A folder that cannot
//! be written refuses [`Journal::open`].
//!
//! Plain synchronous std I/O, meant for a dedicated thread. No clock is read here: every
//! call that depends on time takes `now_ms` (Unix epoch milliseconds, UTC). The daemon
//! moves the periodic fsync and cursor writes to a second thread
//! ([`Journal::defer_syncs`]) so that no result waits behind them on its way to the
//! broker; the promise (written before offered, fsynced within `fsync_interval`) holds.

use std::cell::RefCell;
use std::collections::{HashSet, VecDeque};
use std::fmt::Write as _;
use std::fs::{self, File, OpenOptions};
use std::io::{self, BufRead, BufReader, Read, Write};
use std::path::{Path, PathBuf};

use serde::Deserialize;

use crate::config::JournalSettings;
use crate::timefmt::{civil_from_days, days_from_civil};

const SEGMENT_PREFIX: &str = "eqwatch-";
const SEGMENT_SUFFIX: &str = ".jsonl";
const PUBLISHED_FILE: &str = "published.seq";
const LAST_FILE: &str = "last.seq";
const TMP_SUFFIX: &str = ".tmp";
const MS_PER_DAY: i64 = 86_400_000;
const PROBE_FILE: &str = ".eqwatch-write-probe";
/// Held with an exclusive lock while a journal is open: one process per folder.
const LOCK_FILE: &str = "journal.lock";
/// While records are held, a write is tried again at most this often (ms).
pub const RETRY_MS: i64 = 1_000;
/// What a held record costs besides its topic and payload (struct, queue slot), for
/// the memory cap.
const HELD_OVERHEAD: usize = 96;

/// Errors from the journal. Every message names the file or directory involved.
#[derive(Debug, thiserror::Error)]
pub enum JournalError {
    #[error(
        "journal directory {}: cannot {action}: {source}; check that the path is a writable directory",
        path.display()
    )]
    Dir {
        path: PathBuf,
        action: &'static str,
        #[source]
        source: io::Error,
    },
    #[error(
        "journal file {}: cannot {action}: {source}; check free disk space and permissions",
        path.display()
    )]
    Io {
        path: PathBuf,
        action: &'static str,
        #[source]
        source: io::Error,
    },
    #[error(
        "journal cursor file {}: expected a decimal sequence number, found {text:?}; \
         fix the number or delete the file (without published.seq everything on disk is replayed)",
        path.display()
    )]
    BadCursor { path: PathBuf, text: String },
    #[error(
        "journal {}: payload for topic {topic:?} must be the text of one JSON object on a single line \
         (starting with '{{', ending with '}}', no newline); serialise it compactly",
        dir.display()
    )]
    BadPayload { dir: PathBuf, topic: String },
    #[error(
        "journal {}: cannot mark sequence {seq} published, the last appended sequence is {last}; \
         acknowledge only sequence numbers returned by append",
        dir.display()
    )]
    CursorAhead { dir: PathBuf, seq: u64, last: u64 },
    #[error(
        "journal {}: timestamp {now_ms} ms is outside the years 0000-9999 usable in segment names; \
         check the system clock",
        dir.display()
    )]
    BadTime { dir: PathBuf, now_ms: i64 },
    #[error(
        "journal directory {} is in use by another eqwatch process (it holds {LOCK_FILE}); \
         give each daemon its own journal.dir",
        dir.display()
    )]
    InUse { dir: PathBuf },
}

impl JournalError {
    /// A failure of the disk or folder (full, unwritable, unreadable), as opposed to a
    /// record the journal refuses whatever the disk does.
    pub fn is_disk(&self) -> bool {
        matches!(self, JournalError::Dir { .. } | JournalError::Io { .. })
    }
}

/// One journalled message.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Record {
    pub seq: u64,
    pub ts_ms: i64,
    pub topic: String,
    pub retain: bool,
    /// JSON text of the payload object, exactly as appended.
    pub payload: String,
}

/// What [`Journal::append_batch`] did with each record.
#[derive(Debug, Default)]
pub struct Batch {
    /// Per item, in order: its sequence number, or `None` when it was not kept.
    pub seqs: Vec<Option<u64>>,
    pub errors: Vec<JournalError>,
}

/// Counters for metrics and status. `dropped_*` and `corrupt_lines` count since `open`.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub struct JournalStats {
    /// Segment files on disk.
    pub files: usize,
    /// Bytes in segment files.
    pub bytes: u64,
    pub last_seq: u64,
    pub published_seq: u64,
    /// Records still on disk and not yet acknowledged by the broker.
    pub backlog: u64,
    /// Records deleted by the total size cap.
    pub dropped_records: u64,
    /// Of those, records that had not been acknowledged.
    pub dropped_unpublished: u64,
    /// Torn tail lines truncated at open plus unreadable lines met by `read_after`.
    pub corrupt_lines: u64,
    /// Records held in memory because the disk did not take them.
    pub held_records: usize,
    /// Records dropped from memory over `memory_max_bytes` without ever being written,
    /// and of those the ones the broker had not acknowledged.
    pub held_dropped: u64,
    pub held_dropped_unpublished: u64,
}

/// One segment file.
#[derive(Debug)]
struct Segment {
    path: PathBuf,
    /// UTC day (days since 1970-01-01) from the file name.
    day: i64,
    first_seq: u64,
    bytes: u64,
}

/// The journal: the segment files of one directory and the two cursors.
#[derive(Debug)]
pub struct Journal {
    /// Where the periodic fsync and cursor writes go when they are done off the
    /// journal's thread ([`Journal::defer_syncs`]); `None`: done in line.
    syncer: Option<Syncer>,
    dir: PathBuf,
    max_file_bytes: u64,
    max_total_bytes: u64,
    interval_ms: i64,
    /// Ordered by first sequence number; the last one is the segment being written.
    segments: Vec<Segment>,
    /// Append handle on the last segment, opened lazily.
    current: Option<File>,
    last_seq: u64,
    published_seq: u64,
    persisted_published: u64,
    persisted_last: u64,
    last_fsync_ms: i64,
    last_cursor_ms: i64,
    /// Bytes written to the current segment since its last fsync.
    unsynced: bool,
    /// Lines of the batch being appended, not yet written to the current segment
    /// (counted in its `bytes` and in `last_seq` already).
    pending: Vec<u8>,
    /// The batch items of the pending lines, with their sequence numbers.
    pending_items: Vec<(usize, u64)>,
    /// Records numbered but not on disk (see the module docs), oldest first.
    held: VecDeque<Record>,
    held_bytes: usize,
    max_held_bytes: usize,
    held_dropped: u64,
    held_dropped_unpublished: u64,
    /// No write is tried before this (epoch ms) while records are held.
    retry_at_ms: i64,
    /// Tests: every write fails as on a full disk.
    #[cfg(test)]
    fail_writes: bool,
    /// Reused buffer for the head of one line (the payload goes straight to `pending`).
    line: String,
    dropped_records: u64,
    dropped_unpublished: u64,
    truncated_lines: u64,
    /// Unreadable lines already counted, as (segment first seq, byte offset).
    corrupt_seen: RefCell<HashSet<(u64, u64)>>,
    /// The open lock file (the lock goes with it).
    _lock: File,
}

impl Journal {
    /// Creates the directory if needed, scans existing files, recovers last_seq (truncating
    /// a torn tail of the newest segment) and the published cursor.
    pub fn open(settings: &JournalSettings, now_ms: i64) -> Result<Journal, JournalError> {
        let dir = settings.dir.clone();
        fs::create_dir_all(&dir).map_err(|source| JournalError::Dir {
            path: dir.clone(),
            action: "create",
            source,
        })?;
        probe_writable(&dir)?;
        let lock = lock_folder(&dir)?;
        let entries = fs::read_dir(&dir).map_err(|source| JournalError::Dir {
            path: dir.clone(),
            action: "list",
            source,
        })?;
        let mut segments = Vec::new();
        for entry in entries {
            let entry = entry.map_err(|source| JournalError::Dir {
                path: dir.clone(),
                action: "list",
                source,
            })?;
            let name = entry.file_name();
            let Some(name) = name.to_str() else { continue };
            if name == format!("{PUBLISHED_FILE}{TMP_SUFFIX}")
                || name == format!("{LAST_FILE}{TMP_SUFFIX}")
            {
                // Left over from a crash during a cursor update: the old cursor is intact.
                let _ = fs::remove_file(entry.path());
                continue;
            }
            let Some((day, first_seq)) = parse_segment_name(name) else {
                continue;
            };
            let path = entry.path();
            let meta = entry.metadata().map_err(|source| JournalError::Io {
                path: path.clone(),
                action: "read metadata of",
                source,
            })?;
            if !meta.is_file() {
                continue;
            }
            segments.push(Segment {
                path,
                day,
                first_seq,
                bytes: meta.len(),
            });
        }
        segments.sort_by_key(|s| (s.first_seq, s.day));

        let published_seq = read_cursor(&dir.join(PUBLISHED_FILE))?.unwrap_or(0);
        let stored_last = read_cursor(&dir.join(LAST_FILE))?.unwrap_or(0);
        let mut last_seq = published_seq.max(stored_last);
        let mut truncated_lines = 0;
        let mut corrupt_seen = HashSet::new();
        if let Some(seg) = segments.last_mut() {
            last_seq = last_seq.max(seg.first_seq - 1);
            let tail = recover_tail(seg)?;
            truncated_lines = tail.truncated;
            corrupt_seen.extend(tail.corrupt_offsets.iter().map(|&o| (seg.first_seq, o)));
            if let Some(max) = tail.max_seq {
                last_seq = last_seq.max(max);
            }
        }

        let mut journal = Journal {
            dir,
            max_file_bytes: settings.max_file_bytes,
            max_total_bytes: settings.max_total_bytes,
            interval_ms: i64::try_from(settings.fsync_interval.as_millis()).unwrap_or(i64::MAX),
            segments,
            current: None,
            last_seq,
            published_seq,
            persisted_published: published_seq,
            persisted_last: stored_last,
            last_fsync_ms: now_ms,
            last_cursor_ms: now_ms,
            unsynced: false,
            pending: Vec::new(),
            pending_items: Vec::new(),
            held: VecDeque::new(),
            held_bytes: 0,
            max_held_bytes: settings.memory_max_bytes,
            held_dropped: 0,
            held_dropped_unpublished: 0,
            retry_at_ms: now_ms,
            #[cfg(test)]
            fail_writes: false,
            line: String::new(),
            dropped_records: 0,
            dropped_unpublished: 0,
            truncated_lines,
            corrupt_seen: RefCell::new(corrupt_seen),
            _lock: lock,
            syncer: None,
        };
        if journal.persisted_last != journal.last_seq {
            journal.write_cursor(LAST_FILE, journal.last_seq)?;
            journal.persisted_last = journal.last_seq;
        }
        Ok(journal)
    }

    /// Appends one record with the next sequence number and returns that number
    /// (a batch of one: see [`Journal::append_batch`]).
    pub fn append(
        &mut self,
        now_ms: i64,
        topic: &str,
        retain: bool,
        payload: &str,
    ) -> Result<u64, JournalError> {
        let mut b = self.append_batch(now_ms, [(topic, retain, payload)]);
        match (b.seqs.first().copied().flatten(), b.errors.pop()) {
            (Some(seq), None) => Ok(seq),
            (_, Some(e)) => Err(e),
            // Not reached: every item gets a sequence number or an error.
            (None, None) => Err(JournalError::Dir {
                path: self.dir.clone(),
                action: "append to",
                source: io::Error::other("record neither written nor refused"),
            }),
        }
    }

    /// Appends records `(topic, retain, payload)` in order, each with the next sequence
    /// number; `seqs[i]` is item `i`'s number, `None` when it was refused (not a JSON
    /// object on one line, or a clock outside the years 0000-9999; the reasons are in
    /// `errors`).
    ///
    /// Durability, the same promise as one record at a time, per batch: the lines of the
    /// batch are written with one `write` per segment they land in (not one per line),
    /// and every line numbered in `seqs` has reached the OS before this returns, or is
    /// held in memory (see the module docs) when the disk did not take it: a failed write
    /// cuts the segment back to its length before the batch's lines (a line never stays
    /// behind partially) and those lines, and the rest of the batch, are held with their
    /// numbers; the failure is in `errors`. The segment is fsynced when `fsync_interval`
    /// has passed since the last fsync (checked once, after the batch), and always before
    /// a new segment starts. A new segment starts when the UTC day changes or the segment
    /// would exceed `max_file_bytes`; then whole oldest segments (never the current one)
    /// are deleted until the total fits `max_total_bytes`. If the fsync fails, the lines
    /// are already in the file (and numbered) but the error is in `errors`.
    pub fn append_batch<'a>(
        &mut self,
        now_ms: i64,
        items: impl IntoIterator<Item = (&'a str, bool, &'a str)>,
    ) -> Batch {
        let mut out = self.write_batch(now_ms, items);
        let wrote = out.seqs.iter().any(Option::is_some);
        if let Err(e) = self.sync_if_due(now_ms, wrote) {
            out.errors.push(e);
        }
        out
    }

    /// [`Self::append_batch`] without its periodic fsync: the lines have reached the OS
    /// (or are held) when this returns. The daemon hands them to the result link first
    /// and calls [`Self::sync_if_due`] after, so a due fsync (milliseconds on a busy
    /// disk) never holds a result back from the broker; the promise is the same, since
    /// nothing waited for that fsync before either.
    pub fn write_batch<'a>(
        &mut self,
        now_ms: i64,
        items: impl IntoIterator<Item = (&'a str, bool, &'a str)>,
    ) -> Batch {
        let items: Vec<(&str, bool, &str)> = items.into_iter().collect();
        let mut out = Batch {
            seqs: vec![None; items.len()],
            errors: Vec::new(),
        };
        if let Err(e) = self.retry_held(now_ms) {
            out.errors.push(e);
        }
        for (i, &(topic, retain, payload)) in items.iter().enumerate() {
            if let Err(e) = self.check(now_ms, topic, payload) {
                out.errors.push(e);
                continue;
            }
            let seq = self.last_seq + 1;
            if !self.held.is_empty() {
                self.last_seq = seq;
                self.hold(now_ms, seq, topic, retain, payload);
                out.seqs[i] = Some(seq);
                continue;
            }
            let day = now_ms.div_euclid(MS_PER_DAY);
            match self.stage_line(day, seq, now_ms, topic, retain, payload) {
                Ok(()) => self.pending_items.push((i, seq)),
                Err(e) => {
                    out.errors.push(e);
                    self.hold_pending(now_ms, &items);
                    self.hold(now_ms, seq, topic, retain, payload);
                }
            }
            self.last_seq = seq;
            out.seqs[i] = Some(seq);
        }
        if let Err(e) = self.flush_pending() {
            out.errors.push(e);
            self.hold_pending(now_ms, &items);
        }
        out
    }

    /// The periodic fsync after a batch written by [`Self::write_batch`]: when
    /// `fsync_interval` has passed since the last one and the batch numbered lines
    /// (`wrote`).
    pub fn sync_if_due(&mut self, now_ms: i64, wrote: bool) -> Result<(), JournalError> {
        if self.held.is_empty() && wrote && self.fsync_due(now_ms) {
            match (&self.syncer, self.current.as_ref(), self.segments.last()) {
                (Some(syncer), Some(file), Some(seg)) if self.unsynced => {
                    let file = file.try_clone().map_err(|source| JournalError::Io {
                        path: seg.path.clone(),
                        action: "open a second handle for fsync",
                        source,
                    })?;
                    syncer.send(SyncJob::Data {
                        file,
                        path: seg.path.clone(),
                    });
                    self.unsynced = false;
                }
                _ => self.sync_current()?,
            }
            self.last_fsync_ms = now_ms;
        }
        Ok(())
    }

    /// From now on the periodic fsync of the segment ([`Self::sync_if_due`]) and the
    /// periodic cursor writes ([`Self::mark_published`] without `force`) are done by a
    /// thread of their own: a result handed to the link never waits behind them (each
    /// is one or more fsyncs, milliseconds on a busy disk). The promise is unchanged:
    /// they start when due, in order; rotation, recovery, forced and shutdown writes
    /// stay in line and first wait for what is queued. Failures come back through
    /// [`Self::sync_errors`].
    pub fn defer_syncs(&mut self) -> io::Result<()> {
        if self.syncer.is_none() {
            self.syncer = Some(Syncer::start()?);
        }
        Ok(())
    }

    /// Failures of deferred syncs since the last call (empty without [`Self::defer_syncs`]).
    pub fn sync_errors(&self) -> Vec<JournalError> {
        self.syncer
            .as_ref()
            .map_or_else(Vec::new, |s| s.errors.try_iter().collect())
    }

    /// Waits until every deferred sync queued so far is done (before a write in line
    /// touches the same files).
    fn settle(&self) {
        if let Some(syncer) = &self.syncer {
            syncer.settle();
        }
    }

    /// Writes the held records to disk, oldest first (one write each: this is the
    /// recovery path), when [`RETRY_MS`] has passed since the last failure. Returns how
    /// many were written; on a failure the rest stay held.
    pub fn retry_held(&mut self, now_ms: i64) -> Result<usize, JournalError> {
        if self.held.is_empty() || now_ms < self.retry_at_ms {
            return Ok(0);
        }
        let mut written = 0;
        while let Some(rec) = self.held.front() {
            let (seq, ts_ms, retain) = (rec.seq, rec.ts_ms, rec.retain);
            let (topic, payload) = (rec.topic.clone(), rec.payload.clone());
            let day = ts_ms.div_euclid(MS_PER_DAY);
            let r = self
                .stage_line(day, seq, ts_ms, &topic, retain, &payload)
                .and_then(|()| self.flush_pending());
            self.pending_items.clear();
            if let Err(e) = r {
                self.retry_at_ms = now_ms.saturating_add(RETRY_MS);
                return Err(e);
            }
            if let Some(done) = self.held.pop_front() {
                self.held_bytes = self.held_bytes.saturating_sub(held_size(&done));
            }
            written += 1;
        }
        self.sync_current()?;
        self.last_fsync_ms = now_ms;
        Ok(written)
    }

    /// Records held in memory (see the module docs).
    pub fn held(&self) -> usize {
        self.held.len()
    }

    /// Keeps one numbered record in memory; beyond `max_held_bytes` the oldest held
    /// records are dropped (never the newest) and counted.
    fn hold(&mut self, now_ms: i64, seq: u64, topic: &str, retain: bool, payload: &str) {
        let rec = Record {
            seq,
            ts_ms: now_ms,
            topic: topic.to_owned(),
            retain,
            payload: payload.to_owned(),
        };
        self.held_bytes += held_size(&rec);
        self.held.push_back(rec);
        while self.held_bytes > self.max_held_bytes && self.held.len() > 1 {
            if let Some(old) = self.held.pop_front() {
                self.held_bytes = self.held_bytes.saturating_sub(held_size(&old));
                self.held_dropped += 1;
                if old.seq > self.published_seq {
                    self.held_dropped_unpublished += 1;
                }
            }
        }
        if self.held.len() == 1 {
            self.retry_at_ms = now_ms.saturating_add(RETRY_MS);
        }
    }

    /// Moves the staged lines of a batch whose write failed into memory, numbers kept.
    fn hold_pending(&mut self, now_ms: i64, items: &[(&str, bool, &str)]) {
        let pending = std::mem::take(&mut self.pending_items);
        for (i, seq) in pending {
            if let Some(&(topic, retain, payload)) = items.get(i) {
                self.hold(now_ms, seq, topic, retain, payload);
            }
        }
    }

    /// Refuses a record the journal cannot keep whatever the disk does.
    fn check(&self, now_ms: i64, topic: &str, payload: &str) -> Result<(), JournalError> {
        if !(payload.starts_with('{') && payload.ends_with('}') && !payload.contains('\n')) {
            return Err(JournalError::BadPayload {
                dir: self.dir.clone(),
                topic: topic.to_owned(),
            });
        }
        let (year, _, _) = civil_from_days(now_ms.div_euclid(MS_PER_DAY));
        if !(0..=9999).contains(&year) {
            return Err(JournalError::BadTime {
                dir: self.dir.clone(),
                now_ms,
            });
        }
        Ok(())
    }

    /// Adds the line of record `seq` to the pending bytes of the segment for `day`
    /// (rotating and making room first).
    fn stage_line(
        &mut self,
        day: i64,
        seq: u64,
        ts_ms: i64,
        topic: &str,
        retain: bool,
        payload: &str,
    ) -> Result<(), JournalError> {
        // The short head is formed apart; the payload (kilobytes) is copied once, into
        // the pending bytes.
        let mut head = std::mem::take(&mut self.line);
        head.clear();
        write_line_prefix(&mut head, seq, ts_ms, topic, retain);
        const TAIL: &str = "}\n";
        let len = (head.len() + payload.len() + TAIL.len()) as u64;
        let r = self
            .select_segment(day, seq, len)
            .and_then(|()| self.make_room(len));
        if r.is_ok() {
            self.pending.extend_from_slice(head.as_bytes());
            self.pending.extend_from_slice(payload.as_bytes());
            self.pending.extend_from_slice(TAIL.as_bytes());
            if let Some(seg) = self.segments.last_mut() {
                seg.bytes += len;
            }
        }
        self.line = head;
        r
    }

    pub fn last_seq(&self) -> u64 {
        self.last_seq
    }

    pub fn published_seq(&self) -> u64 {
        self.published_seq
    }

    /// Records that everything up to `seq` was acknowledged by the broker (a lower `seq`
    /// than the current cursor is ignored). The cursor file is rewritten when
    /// `fsync_interval` has passed since the last write, or at once with `force`.
    pub fn mark_published(
        &mut self,
        seq: u64,
        now_ms: i64,
        force: bool,
    ) -> Result<(), JournalError> {
        if seq > self.last_seq {
            return Err(JournalError::CursorAhead {
                dir: self.dir.clone(),
                seq,
                last: self.last_seq,
            });
        }
        self.published_seq = self.published_seq.max(seq);
        let due = force || elapsed(self.last_cursor_ms, now_ms, self.interval_ms);
        if !due {
            return Ok(());
        }
        let defer = !force && self.syncer.is_some();
        if !defer {
            self.settle();
        }
        if force || self.persisted_published != self.published_seq {
            self.put_cursor(PUBLISHED_FILE, self.published_seq, defer)?;
            self.persisted_published = self.published_seq;
        }
        if self.persisted_last != self.last_seq {
            self.put_cursor(LAST_FILE, self.last_seq, defer)?;
            self.persisted_last = self.last_seq;
        }
        self.last_cursor_ms = now_ms;
        Ok(())
    }

    /// Up to `max` records with `seq > after`, in order, read from disk and then from
    /// the records held in memory (which are newer than any on disk). Segments whose
    /// whole range is `<= after` (known from the file names) are not opened. Unreadable
    /// lines are skipped and counted once in `corrupt_lines`; a segment deleted behind the
    /// journal's back is skipped.
    pub fn read_after(&self, after: u64, max: usize) -> Result<Vec<Record>, JournalError> {
        let mut out = Vec::new();
        if max == 0 {
            return Ok(out);
        }
        for (i, seg) in self.segments.iter().enumerate() {
            let range_end = match self.segments.get(i + 1) {
                Some(next) => next.first_seq - 1,
                None => self.last_seq,
            };
            if range_end <= after {
                continue;
            }
            let read_err = |source| JournalError::Io {
                path: seg.path.clone(),
                action: "read",
                source,
            };
            let file = match File::open(&seg.path) {
                Ok(f) => f,
                Err(e) if e.kind() == io::ErrorKind::NotFound => continue,
                Err(e) => return Err(read_err(e)),
            };
            // Only the bytes known to hold whole lines.
            let mut reader = BufReader::new(file.take(seg.bytes));
            let mut buf = Vec::new();
            let mut offset = 0u64;
            loop {
                buf.clear();
                let n = reader.read_until(b'\n', &mut buf).map_err(read_err)?;
                if n == 0 {
                    break;
                }
                let line_offset = offset;
                offset += n as u64;
                let Some(body) = buf.strip_suffix(b"\n") else {
                    self.note_corrupt(seg.first_seq, line_offset);
                    continue;
                };
                if quick_seq(body).is_some_and(|s| s <= after) {
                    continue;
                }
                match parse_line(body) {
                    Some(rec) if rec.seq > after => {
                        out.push(rec);
                        if out.len() >= max {
                            return Ok(out);
                        }
                    }
                    Some(_) => {}
                    None => self.note_corrupt(seg.first_seq, line_offset),
                }
            }
        }
        for rec in self.held.iter().filter(|r| r.seq > after) {
            if out.len() >= max {
                break;
            }
            out.push(rec.clone());
        }
        Ok(out)
    }

    pub fn stats(&self) -> JournalStats {
        let oldest_first = self
            .segments
            .first()
            .map_or(self.last_seq + 1, |s| s.first_seq);
        let floor = self.published_seq.max(oldest_first - 1);
        JournalStats {
            files: self.segments.len(),
            bytes: self.segments.iter().map(|s| s.bytes).sum(),
            last_seq: self.last_seq,
            published_seq: self.published_seq,
            backlog: self.last_seq.saturating_sub(floor),
            dropped_records: self.dropped_records,
            dropped_unpublished: self.dropped_unpublished,
            corrupt_lines: self.truncated_lines + self.corrupt_seen.borrow().len() as u64,
            held_records: self.held.len(),
            held_dropped: self.held_dropped,
            held_dropped_unpublished: self.held_dropped_unpublished,
        }
    }

    /// Fsyncs the current segment now and writes any cursor change not yet on disk
    /// (for shutdown).
    pub fn sync(&mut self) -> Result<(), JournalError> {
        self.settle();
        self.sync_current()?;
        if self.persisted_published != self.published_seq {
            self.write_cursor(PUBLISHED_FILE, self.published_seq)?;
            self.persisted_published = self.published_seq;
        }
        if self.persisted_last != self.last_seq {
            self.write_cursor(LAST_FILE, self.last_seq)?;
            self.persisted_last = self.last_seq;
        }
        Ok(())
    }

    fn fsync_due(&self, now_ms: i64) -> bool {
        elapsed(self.last_fsync_ms, now_ms, self.interval_ms)
    }

    fn sync_current(&mut self) -> Result<(), JournalError> {
        if !self.unsynced {
            return Ok(());
        }
        if let (Some(file), Some(seg)) = (self.current.as_ref(), self.segments.last()) {
            file.sync_data().map_err(|source| JournalError::Io {
                path: seg.path.clone(),
                action: "fsync",
                source,
            })?;
        }
        self.unsynced = false;
        Ok(())
    }

    /// Makes the last segment the right one for a line of `len` bytes with sequence `seq`
    /// written on UTC day `day`, and opens it for appending.
    fn select_segment(&mut self, day: i64, seq: u64, len: u64) -> Result<(), JournalError> {
        let rotate = match self.segments.last() {
            None => true,
            Some(seg) => {
                seg.day != day
                    || (seg.bytes > 0 && seg.bytes.saturating_add(len) > self.max_file_bytes)
            }
        };
        if rotate {
            // The finished segment is made durable before the next one exists.
            self.flush_pending()?;
            self.sync_current()?;
            self.current = None;
            if self.segments.last().is_some_and(|seg| seg.bytes == 0) {
                // An empty segment (left by recovery) would only duplicate the new one's range.
                if let Some(seg) = self.segments.last() {
                    remove_if_present(&seg.path)?;
                }
                self.segments.pop();
            }
            let (y, m, d) = civil_from_days(day);
            let path = self.dir.join(format!(
                "{SEGMENT_PREFIX}{y:04}{m:02}{d:02}-{seq:012}{SEGMENT_SUFFIX}"
            ));
            let file = open_append(&path)?;
            sync_dir(&self.dir)?;
            self.segments.push(Segment {
                path,
                day,
                first_seq: seq,
                bytes: 0,
            });
            self.current = Some(file);
        } else if self.current.is_none()
            && let Some(seg) = self.segments.last()
        {
            self.current = Some(open_append(&seg.path)?);
        }
        Ok(())
    }

    /// Deletes whole oldest segments (never the current one) until `len` more bytes fit
    /// under `max_total_bytes`, counting what was dropped.
    fn make_room(&mut self, len: u64) -> Result<(), JournalError> {
        let mut total: u64 = self.segments.iter().map(|s| s.bytes).sum();
        while total.saturating_add(len) > self.max_total_bytes && self.segments.len() > 1 {
            let next_first = self.segments[1].first_seq;
            let oldest = &self.segments[0];
            remove_if_present(&oldest.path)?;
            let dropped = next_first.saturating_sub(oldest.first_seq);
            let unpublished =
                next_first.saturating_sub(oldest.first_seq.max(self.published_seq + 1));
            self.dropped_records += dropped;
            self.dropped_unpublished += unpublished;
            total -= oldest.bytes;
            self.segments.remove(0);
        }
        Ok(())
    }

    /// Writes the pending lines to the current segment in one go. On failure cuts the
    /// segment back to its length before them (so no partial line stays behind) and
    /// leaves `pending_items` for the caller to hold.
    fn flush_pending(&mut self) -> Result<(), JournalError> {
        if self.pending.is_empty() {
            return Ok(());
        }
        let pending = self.pending.len() as u64;
        let (Some(file), Some(seg)) = (self.current.as_mut(), self.segments.last_mut()) else {
            // Not reached: a line is staged only with an open current segment.
            self.pending.clear();
            return Err(JournalError::Dir {
                path: self.dir.clone(),
                action: "find the current segment in",
                source: io::Error::other("no open segment"),
            });
        };
        #[cfg(test)]
        let written = if self.fail_writes {
            Err(io::Error::from(io::ErrorKind::StorageFull))
        } else {
            file.write_all(&self.pending)
        };
        #[cfg(not(test))]
        let written = file.write_all(&self.pending);
        self.pending.clear();
        match written {
            Ok(()) => {
                self.pending_items.clear();
                self.unsynced = true;
                Ok(())
            }
            Err(source) => {
                seg.bytes -= pending;
                let _ = file.set_len(seg.bytes);
                let path = seg.path.clone();
                self.current = None;
                Err(JournalError::Io {
                    path,
                    action: "append to",
                    source,
                })
            }
        }
    }

    /// A cursor write, queued for the syncer (`defer`) or done now.
    fn put_cursor(&self, name: &'static str, value: u64, defer: bool) -> Result<(), JournalError> {
        let (path, tmp) = self.cursor_paths(name);
        match (&self.syncer, defer) {
            // The paths are made here, on the journal's thread; the syncer only makes
            // the system calls.
            (Some(syncer), true) => {
                syncer.send(SyncJob::Cursor {
                    path,
                    tmp,
                    dir: self.dir.clone(),
                    value,
                });
                Ok(())
            }
            _ => replace_cursor(&self.dir, &path, &tmp, value),
        }
    }

    fn write_cursor(&self, name: &str, value: u64) -> Result<(), JournalError> {
        let (path, tmp) = self.cursor_paths(name);
        replace_cursor(&self.dir, &path, &tmp, value)
    }

    /// A cursor file and the temporary file it is replaced through.
    fn cursor_paths(&self, name: &str) -> (PathBuf, PathBuf) {
        (
            self.dir.join(name),
            self.dir.join(format!("{name}{TMP_SUFFIX}")),
        )
    }

    fn note_corrupt(&self, first_seq: u64, offset: u64) {
        self.corrupt_seen.borrow_mut().insert((first_seq, offset));
    }
}

/// Replaces cursor file `path` in `dir` atomically: the value into `tmp`, fsync, rename
/// into place, fsync of the folder.
fn replace_cursor(dir: &Path, path: &Path, tmp: &Path, value: u64) -> Result<(), JournalError> {
    let io_err = |action, source| JournalError::Io {
        path: tmp.to_path_buf(),
        action,
        source,
    };
    let mut file = File::create(tmp).map_err(|e| io_err("create", e))?;
    writeln!(file, "{value}").map_err(|e| io_err("write", e))?;
    file.sync_all().map_err(|e| io_err("fsync", e))?;
    drop(file);
    fs::rename(tmp, path).map_err(|source| JournalError::Io {
        path: path.to_path_buf(),
        action: "replace (rename into place)",
        source,
    })?;
    sync_dir(dir)
}

impl Drop for Journal {
    fn drop(&mut self) {
        // Best effort; `sync` is the way to learn about failures.
        self.settle();
        let _ = self.sync_current();
    }
}

/// A deferred sync (see [`Journal::defer_syncs`]).
#[derive(Debug)]
enum SyncJob {
    /// fsync (data) of a segment, through a second handle of the open file.
    Data { file: File, path: PathBuf },
    Cursor {
        path: PathBuf,
        tmp: PathBuf,
        dir: PathBuf,
        value: u64,
    },
    /// Answered once everything queued before it is done.
    Settle(std::sync::mpsc::SyncSender<()>),
}

/// The thread that does the journal's periodic syncs, in the order queued.
#[derive(Debug)]
struct Syncer {
    jobs: std::sync::mpsc::Sender<SyncJob>,
    errors: std::sync::mpsc::Receiver<JournalError>,
}

impl Syncer {
    fn start() -> io::Result<Self> {
        let (jobs, todo) = std::sync::mpsc::channel::<SyncJob>();
        let (report, errors) = std::sync::mpsc::channel();
        std::thread::Builder::new()
            .name("eqwatch-fsync".into())
            .spawn(move || {
                // Ends when the journal (the only sender) is gone.
                for job in todo {
                    let r = match job {
                        SyncJob::Data { file, path } => {
                            file.sync_data().map_err(|source| JournalError::Io {
                                path,
                                action: "fsync",
                                source,
                            })
                        }
                        SyncJob::Cursor {
                            path,
                            tmp,
                            dir,
                            value,
                        } => replace_cursor(&dir, &path, &tmp, value),
                        SyncJob::Settle(done) => {
                            let _ = done.send(());
                            Ok(())
                        }
                    };
                    if let Err(e) = r {
                        let _ = report.send(e);
                    }
                }
            })?;
        Ok(Syncer { jobs, errors })
    }

    fn send(&self, job: SyncJob) {
        // The thread ends only with this sender, so the send cannot fail while `self` lives.
        let _ = self.jobs.send(job);
    }

    fn settle(&self) {
        // Bounded: its one slot is made here, so the answer allocates nothing there.
        let (done, wait) = std::sync::mpsc::sync_channel(1);
        self.send(SyncJob::Settle(done));
        let _ = wait.recv();
    }
}

/// True when `interval_ms` has passed since `since_ms`, or the clock went backwards.
/// Takes the folder's exclusive lock (released when the file closes, also on a crash).
fn lock_folder(dir: &Path) -> Result<File, JournalError> {
    let path = dir.join(LOCK_FILE);
    let file = OpenOptions::new()
        .write(true)
        .create(true)
        .truncate(false)
        .open(&path)
        .map_err(|source| JournalError::Io {
            path: path.clone(),
            action: "open",
            source,
        })?;
    match file.try_lock() {
        Ok(()) => Ok(file),
        Err(fs::TryLockError::WouldBlock) => Err(JournalError::InUse {
            dir: dir.to_path_buf(),
        }),
        Err(fs::TryLockError::Error(source)) => Err(JournalError::Io {
            path,
            action: "lock",
            source,
        }),
    }
}

/// What a held record counts against `memory_max_bytes`.
fn held_size(r: &Record) -> usize {
    r.topic.len() + r.payload.len() + HELD_OVERHEAD
}

/// Refuses a folder the journal could not write: a file is created, written, synced and
/// removed (a read-only mount or a missing permission fails here, not at the first result).
fn probe_writable(dir: &Path) -> Result<(), JournalError> {
    let path = dir.join(PROBE_FILE);
    let r = OpenOptions::new()
        .write(true)
        .create(true)
        .truncate(true)
        .open(&path)
        .and_then(|mut f| f.write_all(b"probe\n").and_then(|()| f.sync_all()));
    let _ = fs::remove_file(&path);
    r.map_err(|source| JournalError::Dir {
        path: dir.to_path_buf(),
        action: "write a file in",
        source,
    })
}

fn elapsed(since_ms: i64, now_ms: i64, interval_ms: i64) -> bool {
    now_ms < since_ms || now_ms.saturating_sub(since_ms) >= interval_ms
}

/// `(UTC day, first seq)` from `eqwatch-YYYYMMDD-<digits>.jsonl`, or `None` for other names.
fn parse_segment_name(name: &str) -> Option<(i64, u64)> {
    let core = name
        .strip_prefix(SEGMENT_PREFIX)?
        .strip_suffix(SEGMENT_SUFFIX)?;
    let (date, seq) = core.split_once('-')?;
    if date.len() != 8 || !date.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    if seq.is_empty() || !seq.bytes().all(|b| b.is_ascii_digit()) {
        return None;
    }
    let y: i64 = date[..4].parse().ok()?;
    let m: u32 = date[4..6].parse().ok()?;
    let d: u32 = date[6..].parse().ok()?;
    let day = days_from_civil(y, m, d);
    // Reject dates such as 20240231 that do not come back unchanged.
    if civil_from_days(day) != (y, m, d) {
        return None;
    }
    let first_seq: u64 = seq.parse().ok()?;
    (first_seq >= 1).then_some((day, first_seq))
}

/// Reads a cursor file; `None` when it does not exist.
fn read_cursor(path: &Path) -> Result<Option<u64>, JournalError> {
    let text = match fs::read_to_string(path) {
        Ok(t) => t,
        Err(e) if e.kind() == io::ErrorKind::NotFound => return Ok(None),
        Err(e) if e.kind() == io::ErrorKind::InvalidData => {
            return Err(JournalError::BadCursor {
                path: path.to_path_buf(),
                text: "<not UTF-8>".to_owned(),
            });
        }
        Err(source) => {
            return Err(JournalError::Io {
                path: path.to_path_buf(),
                action: "read",
                source,
            });
        }
    };
    match text.trim().parse::<u64>() {
        Ok(v) => Ok(Some(v)),
        Err(_) => Err(JournalError::BadCursor {
            path: path.to_path_buf(),
            text: text.chars().take(40).collect(),
        }),
    }
}

/// What scanning the newest segment found.
struct TailScan {
    max_seq: Option<u64>,
    /// Invalid lines after the last valid one, cut off.
    truncated: u64,
    /// Offsets of invalid lines before the last valid one, left in place.
    corrupt_offsets: Vec<u64>,
}

/// Scans a segment and truncates everything after its last valid, newline-terminated
/// line (a partial write, or garbage left by a crash).
fn recover_tail(seg: &mut Segment) -> Result<TailScan, JournalError> {
    let io_err = |action, source| JournalError::Io {
        path: seg.path.clone(),
        action,
        source,
    };
    let file = OpenOptions::new()
        .read(true)
        .write(true)
        .open(&seg.path)
        .map_err(|e| io_err("open", e))?;
    let mut reader = BufReader::new(&file);
    let mut buf = Vec::new();
    let mut offset = 0u64;
    let mut good_end = 0u64;
    let mut max_seq = None;
    let mut corrupt_offsets = Vec::new();
    let mut pending_bad = Vec::new();
    loop {
        buf.clear();
        let n = reader
            .read_until(b'\n', &mut buf)
            .map_err(|e| io_err("read", e))?;
        if n == 0 {
            break;
        }
        let line_offset = offset;
        offset += n as u64;
        match buf.strip_suffix(b"\n").and_then(parse_line) {
            Some(rec) => {
                corrupt_offsets.append(&mut pending_bad);
                good_end = offset;
                max_seq = max_seq.max(Some(rec.seq));
            }
            None => pending_bad.push(line_offset),
        }
    }
    drop(reader);
    if good_end < offset {
        file.set_len(good_end).map_err(|e| io_err("truncate", e))?;
        file.sync_all().map_err(|e| io_err("fsync", e))?;
    }
    seg.bytes = good_end;
    Ok(TailScan {
        max_seq,
        truncated: pending_bad.len() as u64,
        corrupt_offsets,
    })
}

fn open_append(path: &Path) -> Result<File, JournalError> {
    OpenOptions::new()
        .create(true)
        .append(true)
        .open(path)
        .map_err(|source| JournalError::Io {
            path: path.to_path_buf(),
            action: "open for appending",
            source,
        })
}

fn remove_if_present(path: &Path) -> Result<(), JournalError> {
    match fs::remove_file(path) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == io::ErrorKind::NotFound => Ok(()),
        Err(source) => Err(JournalError::Io {
            path: path.to_path_buf(),
            action: "delete",
            source,
        }),
    }
}

/// Makes a file creation or rename durable (Unix; a no-op elsewhere).
fn sync_dir(dir: &Path) -> Result<(), JournalError> {
    #[cfg(unix)]
    {
        let handle = File::open(dir).map_err(|source| JournalError::Dir {
            path: dir.to_path_buf(),
            action: "open",
            source,
        })?;
        handle.sync_all().map_err(|source| JournalError::Dir {
            path: dir.to_path_buf(),
            action: "fsync",
            source,
        })?;
    }
    #[cfg(not(unix))]
    let _ = dir;
    Ok(())
}

/// Everything in a line before the payload text: `{"seq":..,"ts_ms":..,"topic":..,"retain":..,"payload":`.
fn line_prefix(seq: u64, ts_ms: i64, topic: &str, retain: bool) -> String {
    let mut s = String::with_capacity(64 + topic.len());
    write_line_prefix(&mut s, seq, ts_ms, topic, retain);
    s
}

/// [`line_prefix`] appended to `s`.
fn write_line_prefix(s: &mut String, seq: u64, ts_ms: i64, topic: &str, retain: bool) {
    let _ = write!(s, "{{\"seq\":{seq},\"ts_ms\":{ts_ms},\"topic\":");
    push_json_string(s, topic);
    let _ = write!(s, ",\"retain\":{retain},\"payload\":");
}

/// Appends `text` as a JSON string literal. Deterministic, so a line's prefix can be
/// rebuilt from its parsed fields when reading back.
fn push_json_string(out: &mut String, text: &str) {
    out.push('"');
    for ch in text.chars() {
        match ch {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            c if u32::from(c) < 0x20 => {
                let _ = write!(out, "\\u{:04x}", u32::from(c));
            }
            c => out.push(c),
        }
    }
    out.push('"');
}

/// The sequence number of a line written by `append`, read without parsing the JSON.
fn quick_seq(line: &[u8]) -> Option<u64> {
    let rest = line.strip_prefix(b"{\"seq\":")?;
    let digits = rest.iter().take_while(|b| b.is_ascii_digit()).count();
    if digits == 0 || rest.get(digits) != Some(&b',') {
        return None;
    }
    std::str::from_utf8(&rest[..digits]).ok()?.parse().ok()
}

/// The fields of a line other than the payload, which is checked for syntax only.
#[derive(Deserialize)]
struct LineHead {
    seq: u64,
    ts_ms: i64,
    topic: String,
    retain: bool,
    #[serde(rename = "payload")]
    _payload: serde::de::IgnoredAny,
}

/// The payload of a line in another layout (for example edited by hand).
#[derive(Deserialize)]
struct LinePayload {
    payload: serde_json::Map<String, serde_json::Value>,
}

/// Parses one line (without its newline); `None` if it is not a valid record.
///
/// The whole line is validated with serde_json. For lines in the layout `append` writes
/// (rebuilt from the parsed fields and compared), the payload is the raw text between
/// that prefix and the closing brace, byte for byte. Other valid layouts fall back to
/// re-serialising the payload object with serde_json (keys then come out sorted).
fn parse_line(line: &[u8]) -> Option<Record> {
    let head: LineHead = serde_json::from_slice(line).ok()?;
    let prefix = line_prefix(head.seq, head.ts_ms, &head.topic, head.retain);
    let raw = line
        .strip_prefix(prefix.as_bytes())
        .and_then(|rest| rest.strip_suffix(b"}"))
        .filter(|raw| raw.first() == Some(&b'{'));
    let payload = match raw {
        // serde_json does not check UTF-8 inside skipped strings, so check it here.
        Some(raw) => String::from_utf8(raw.to_vec()).ok()?,
        None => {
            let other: LinePayload = serde_json::from_slice(line).ok()?;
            serde_json::Value::Object(other.payload).to_string()
        }
    };
    Some(Record {
        seq: head.seq,
        ts_ms: head.ts_ms,
        topic: head.topic,
        retain: head.retain,
        payload,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Duration;

    /// 2024-03-01T00:00:00Z.
    const T0: i64 = 1_709_251_200_000;

    fn settings(dir: &Path, max_file: u64, max_total: u64, fsync_ms: u64) -> JournalSettings {
        JournalSettings {
            dir: dir.join("journal"),
            max_file_bytes: max_file,
            max_total_bytes: max_total,
            fsync_interval: Duration::from_millis(fsync_ms),
            memory_max_bytes: 64 * 1024,
        }
    }

    fn segment_names(dir: &Path) -> Vec<String> {
        let mut names: Vec<String> = fs::read_dir(dir)
            .expect("list journal dir")
            .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
            .filter(|n| n.ends_with(SEGMENT_SUFFIX))
            .collect();
        names.sort();
        names
    }

    fn seqs(records: &[Record]) -> Vec<u64> {
        records.iter().map(|r| r.seq).collect()
    }

    fn payload(i: u64) -> String {
        format!(r#"{{"value":{i},"unit":"K","z":1.50,"a":null}}"#)
    }

    #[test]
    fn t0_is_march_first_2024() {
        assert_eq!(civil_from_days(T0.div_euclid(MS_PER_DAY)), (2024, 3, 1));
    }

    #[test]
    fn append_and_read_back_round_trip() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let mut j = Journal::open(&s, T0).expect("open");
        assert_eq!(j.last_seq(), 0);
        let topic = "plant/\"r1\"\\approach\u{1}é";
        for i in 1..=3 {
            let seq = j
                .append(T0 + i as i64, topic, i % 2 == 0, &payload(i))
                .expect("append");
            assert_eq!(seq, i);
        }
        let all = j.read_after(0, 10).expect("read");
        assert_eq!(seqs(&all), vec![1, 2, 3]);
        for (i, r) in (1..).zip(&all) {
            assert_eq!(r.ts_ms, T0 + i as i64);
            assert_eq!(r.topic, topic);
            assert_eq!(r.retain, i % 2 == 0);
            // Byte for byte: key order and number text are kept.
            assert_eq!(r.payload, payload(i));
        }
        assert_eq!(seqs(&j.read_after(2, 10).expect("read")), vec![3]);
        assert!(j.read_after(3, 10).expect("read").is_empty());
        assert!(j.read_after(0, 0).expect("read").is_empty());
        // Every line is plain JSON.
        let names = segment_names(&s.dir);
        assert_eq!(
            names,
            vec!["eqwatch-20240301-000000000001.jsonl".to_owned()]
        );
        let text = fs::read_to_string(s.dir.join(&names[0])).expect("read segment");
        for line in text.lines() {
            let v: serde_json::Value = serde_json::from_str(line).expect("json line");
            assert!(v["payload"].is_object());
        }
        let st = j.stats();
        assert_eq!((st.files, st.last_seq, st.backlog), (1, 3, 3));
        assert_eq!(st.bytes, text.len() as u64);
    }

    #[test]
    fn a_written_batch_is_fsynced_only_when_asked_and_due() {
        // The daemon writes a batch, hands it to the link, then asks for the fsync.
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let mut j = Journal::open(&s, T0).expect("open");
        // Opened at T0: the periodic fsync is due from T0 + 1 s.
        let (p1, p2, p3) = (payload(1), payload(2), payload(3));
        let b = j.write_batch(T0 + 1000, [("t", false, p1.as_str())]);
        assert_eq!((b.seqs, b.errors.len()), (vec![Some(1)], 0));
        assert!(
            j.unsynced,
            "write_batch leaves even a due fsync to the caller"
        );
        j.sync_if_due(T0 + 1000, false).expect("sync");
        assert!(
            j.unsynced,
            "a batch that numbered nothing asks for no fsync"
        );
        j.sync_if_due(T0 + 1000, true).expect("sync");
        assert!(!j.unsynced, "due: synced");
        j.write_batch(T0 + 1500, [("t", false, p2.as_str())]);
        j.sync_if_due(T0 + 1500, true).expect("sync");
        assert!(j.unsynced, "not due again within fsync_interval (1 s)");
        // append_batch (the write and the due fsync in one) keeps its promise.
        j.append_batch(T0 + 2000, [("t", false, p3.as_str())]);
        assert!(!j.unsynced);
    }

    #[test]
    fn deferred_syncs_happen_in_order_off_the_thread_and_forced_writes_wait_for_them() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let mut j = Journal::open(&s, T0).expect("open");
        j.defer_syncs().expect("syncer thread");
        let cursor = |name: &str| fs::read_to_string(s.dir.join(name)).unwrap_or_default();
        let (p1, p2, p3) = (payload(1), payload(2), payload(3));
        j.write_batch(
            T0 + 1000,
            [("t", false, p1.as_str()), ("t", false, p2.as_str())],
        );
        j.sync_if_due(T0 + 1000, true).expect("queued");
        assert!(!j.unsynced, "the fsync is queued, not owed");
        // A periodic cursor write is queued; once the syncer has settled it is on disk.
        j.mark_published(1, T0 + 1000, false).expect("queued");
        j.settle();
        assert_eq!(cursor(PUBLISHED_FILE), "1\n");
        assert_eq!(cursor(LAST_FILE), "2\n");
        // Queued, then forced at once: the forced write waits for the queued one, so
        // the file ends with the newer value whatever the timing.
        j.write_batch(T0 + 2000, [("t", false, p3.as_str())]);
        j.mark_published(2, T0 + 2000, false).expect("queued");
        j.mark_published(3, T0 + 2000, true)
            .expect("forced, in line");
        assert_eq!(cursor(PUBLISHED_FILE), "3\n");
        assert!(j.sync_errors().is_empty());
        // A failure on the syncer comes back (the folder is gone: the cursor cannot be
        // replaced).
        let p4 = payload(4);
        j.write_batch(T0 + 3000, [("t", false, p4.as_str())]);
        fs::remove_dir_all(&s.dir).expect("remove the journal folder");
        j.mark_published(4, T0 + 4000, false).expect("queued");
        j.settle();
        let errors = j.sync_errors();
        assert!(!errors.is_empty(), "the failed cursor writes are reported");
    }

    #[test]
    fn a_failed_write_holds_records_with_their_numbers_until_the_disk_takes_them() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=3 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        let before = fs::read_to_string(s.dir.join(&segment_names(&s.dir)[0])).unwrap();
        // The disk stops taking writes (as full): the batch keeps its numbers, in memory.
        j.fail_writes = true;
        let (p4, p5, p6) = (payload(4), payload(5), payload(6));
        let b = j.append_batch(
            T0 + 10,
            [("t", false, p4.as_str()), ("t", true, p5.as_str())],
        );
        assert_eq!(b.seqs, vec![Some(4), Some(5)]);
        assert_eq!(b.errors.len(), 1, "one failed write, one error");
        assert!(b.errors[0].is_disk());
        // No partial line stays behind.
        let after = fs::read_to_string(s.dir.join(&segment_names(&s.dir)[0])).unwrap();
        assert_eq!(after, before);
        // While records are held, new ones are held too without another write attempt
        // (inside the retry interval: no error).
        let b = j.append_batch(T0 + 20, [("t", false, p6.as_str())]);
        assert_eq!((b.seqs, b.errors.len()), (vec![Some(6)], 0));
        assert_eq!(j.held(), 3);
        assert_eq!(j.stats().held_records, 3);
        // Read-back serves disk and memory alike, in order.
        assert_eq!(seqs(&j.read_after(0, 100).unwrap()), vec![1, 2, 3, 4, 5, 6]);
        assert_eq!(seqs(&j.read_after(4, 1).unwrap()), vec![5]);
        // A retry after the interval on a still-full disk fails and keeps them.
        assert!(j.retry_held(T0 + 10 + RETRY_MS).is_err());
        assert_eq!(j.held(), 3);
        // Space returns: not before the next interval, then all at once, in order.
        j.fail_writes = false;
        assert_eq!(j.retry_held(T0 + 10 + RETRY_MS + 1).unwrap(), 0);
        assert_eq!(j.retry_held(T0 + 10 + 2 * RETRY_MS).unwrap(), 3);
        assert_eq!(j.held(), 0);
        assert_eq!(j.append(T0 + 30, "t", false, &payload(7)).unwrap(), 7);
        drop(j);
        let j = Journal::open(&s, T0 + 40).expect("reopen");
        let all = j.read_after(0, 100).unwrap();
        assert_eq!(seqs(&all), vec![1, 2, 3, 4, 5, 6, 7]);
        assert!(all[4].retain, "held records keep their fields");
        assert_eq!(all[3].ts_ms, T0 + 10, "and their time");
    }

    #[test]
    fn a_folder_open_in_another_journal_is_refused_until_it_closes() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let first = Journal::open(&s, T0).expect("open");
        let e = Journal::open(&s, T0).expect_err("second open of the same folder");
        assert!(matches!(e, JournalError::InUse { .. }), "{e}");
        assert!(e.to_string().contains("own journal.dir"), "{e}");
        drop(first);
        Journal::open(&s, T0).expect("free again once the first is closed");
    }

    #[test]
    fn records_held_beyond_the_memory_cap_drop_the_oldest_and_are_counted() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let mut j = Journal::open(&s, T0).expect("open");
        j.fail_writes = true;
        // About 1.1 KB each against a 64 KiB cap.
        let big = format!("{{\"pad\":\"{}\"}}", "x".repeat(1000));
        for _ in 0..20 {
            j.append_batch(T0, [("t", false, big.as_str())]);
        }
        // The broker acknowledged the first 20 (the cursor write may fail: not asserted).
        let _ = j.mark_published(20, T0, false);
        for _ in 0..90 {
            j.append_batch(T0, [("t", false, big.as_str())]);
        }
        let st = j.stats();
        assert!(st.held_records < 64, "{} held", st.held_records);
        assert_eq!(st.held_records as u64 + st.held_dropped, 110);
        assert!(j.held_bytes <= 64 * 1024);
        // The newest are the ones kept.
        let kept = j.read_after(0, 1000).unwrap();
        assert_eq!(kept.last().map(|r| r.seq), Some(110));
        // Dropped records the broker had acknowledged (1..=20) are not counted as lost.
        assert_eq!(st.held_dropped_unpublished, st.held_dropped - 20);
    }

    #[test]
    fn a_batch_numbers_in_order_skips_refused_items_and_rotates_inside() {
        let tmp = tempfile::tempdir().expect("tempdir");
        // One line is about 110 bytes: two fit in 250.
        let s = settings(tmp.path(), 250, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        let (p1, p2, p3, p4) = (payload(1), payload(2), payload(3), payload(4));
        let b = j.append_batch(
            T0,
            [
                ("t", false, p1.as_str()),
                ("t", false, "not json"),
                ("t", true, p2.as_str()),
                ("t", false, p3.as_str()),
                ("t", false, p4.as_str()),
            ],
        );
        assert_eq!(b.seqs, vec![Some(1), None, Some(2), Some(3), Some(4)]);
        assert_eq!(b.errors.len(), 1);
        assert!(matches!(b.errors[0], JournalError::BadPayload { .. }));
        assert_eq!(
            segment_names(&s.dir),
            vec![
                "eqwatch-20240301-000000000001.jsonl",
                "eqwatch-20240301-000000000003.jsonl",
            ]
        );
        let all = j.read_after(0, 10).expect("read");
        assert_eq!(seqs(&all), vec![1, 2, 3, 4]);
        assert_eq!(
            (all[1].payload.as_str(), all[1].retain),
            (p2.as_str(), true)
        );
        let on_disk: u64 = segment_names(&s.dir)
            .iter()
            .map(|n| fs::metadata(s.dir.join(n)).expect("meta").len())
            .sum();
        assert_eq!(j.stats().bytes, on_disk);
        assert_eq!(j.append(T0, "t", false, "{}").expect("append"), 5);
    }

    #[test]
    fn rotates_by_size() {
        let tmp = tempfile::tempdir().expect("tempdir");
        // One line is about 110 bytes: two fit in 250.
        let s = settings(tmp.path(), 250, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=5 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        assert_eq!(
            segment_names(&s.dir),
            vec![
                "eqwatch-20240301-000000000001.jsonl",
                "eqwatch-20240301-000000000003.jsonl",
                "eqwatch-20240301-000000000005.jsonl",
            ]
        );
        for name in segment_names(&s.dir) {
            let len = fs::metadata(s.dir.join(name)).expect("meta").len();
            assert!(len <= 250, "segment of {len} bytes");
        }
        // A line larger than the limit still goes in, alone in its segment.
        let big = format!(r#"{{"x":"{}"}}"#, "y".repeat(400));
        assert_eq!(j.append(T0, "t", false, &big).expect("append"), 6);
        assert_eq!(j.append(T0, "t", false, &payload(7)).expect("append"), 7);
        assert_eq!(j.stats().files, 5);
        assert_eq!(j.read_after(5, 1).expect("read")[0].payload, big);
    }

    #[test]
    fn rotates_by_utc_day() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        // 2024-02-28T23:59:59.999Z, then the leap day, then March.
        let feb28_end = T0 - MS_PER_DAY - 1;
        j.append(feb28_end, "t", false, "{}").expect("append");
        j.append(feb28_end, "t", false, "{}").expect("append");
        j.append(feb28_end + 1, "t", false, "{}").expect("append");
        j.append(T0 + MS_PER_DAY - 1, "t", false, "{}")
            .expect("append");
        assert_eq!(
            segment_names(&s.dir),
            vec![
                "eqwatch-20240228-000000000001.jsonl",
                "eqwatch-20240229-000000000003.jsonl",
                "eqwatch-20240301-000000000004.jsonl",
            ]
        );
        assert_eq!(seqs(&j.read_after(0, 10).expect("read")), vec![1, 2, 3, 4]);
    }

    #[test]
    fn total_cap_drops_oldest_files_and_counts() {
        let tmp = tempfile::tempdir().expect("tempdir");
        // Two records a segment, room for about three segments.
        let line_len = (line_prefix(1, T0, "t", false).len() + payload(1).len() + 2) as u64;
        let s = settings(tmp.path(), 2 * line_len, 6 * line_len + 10, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=6 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        assert_eq!(j.stats().files, 3);
        assert_eq!(j.stats().dropped_records, 0);
        j.mark_published(3, T0, false).expect("mark");
        // Seq 7 opens a fourth segment: the first (1, 2; both published) goes.
        j.append(T0, "t", false, &payload(7)).expect("append");
        let st = j.stats();
        assert_eq!(
            (st.files, st.dropped_records, st.dropped_unpublished),
            (3, 2, 0)
        );
        j.append(T0, "t", false, &payload(8)).expect("append");
        // Seq 9: the segment with 3 (published) and 4 (not) goes.
        j.append(T0, "t", false, &payload(9)).expect("append");
        let st = j.stats();
        assert_eq!(
            (st.files, st.dropped_records, st.dropped_unpublished),
            (3, 4, 1)
        );
        assert!(st.bytes <= s.max_total_bytes);
        assert_eq!(st.backlog, 5, "5..=9 are on disk and unacknowledged");
        assert_eq!(
            segment_names(&s.dir),
            vec![
                "eqwatch-20240301-000000000005.jsonl",
                "eqwatch-20240301-000000000007.jsonl",
                "eqwatch-20240301-000000000009.jsonl",
            ]
        );
        // Replay from the cursor starts at the oldest record still on disk.
        let replay = j.read_after(j.published_seq(), 100).expect("read");
        assert_eq!(seqs(&replay), vec![5, 6, 7, 8, 9]);
    }

    #[test]
    fn total_cap_never_deletes_the_current_file() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 10, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=3 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        assert_eq!(j.stats().files, 1);
        assert_eq!(j.stats().dropped_records, 0);
        assert_eq!(j.read_after(0, 10).expect("read").len(), 3);
    }

    #[test]
    fn reopen_recovers_last_and_published_seq() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 250, 1 << 24, 60_000);
        {
            let mut j = Journal::open(&s, T0).expect("open");
            for i in 1..=5 {
                j.append(T0 + 1, "t", true, &payload(i)).expect("append");
            }
            j.mark_published(4, T0 + 2, true).expect("mark");
            // Not forced and within the interval: not persisted.
            j.mark_published(5, T0 + 3, false).expect("mark");
        }
        let mut j = Journal::open(&s, T0 + 10).expect("reopen");
        assert_eq!(j.last_seq(), 5);
        assert_eq!(j.published_seq(), 4);
        assert_eq!(j.stats().backlog, 1);
        assert_eq!(j.stats().corrupt_lines, 0);
        assert_eq!(j.append(T0 + 11, "t", true, "{}").expect("append"), 6);
        assert_eq!(seqs(&j.read_after(4, 10).expect("read")), vec![5, 6]);
        // The last segment (seq 5) was continued, not replaced.
        assert_eq!(segment_names(&s.dir).len(), 3);
    }

    #[test]
    fn seq_never_repeats_when_all_files_are_gone() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 60_000);
        {
            let mut j = Journal::open(&s, T0).expect("open");
            for i in 1..=5 {
                j.append(T0, "t", false, &payload(i)).expect("append");
            }
            j.sync().expect("sync");
        }
        for name in segment_names(&s.dir) {
            fs::remove_file(s.dir.join(name)).expect("remove");
        }
        let mut j = Journal::open(&s, T0).expect("reopen");
        assert_eq!(j.last_seq(), 5);
        assert_eq!(j.append(T0, "t", false, "{}").expect("append"), 6);
        assert_eq!(
            segment_names(&s.dir),
            vec!["eqwatch-20240301-000000000006.jsonl"]
        );
    }

    #[test]
    fn torn_last_line_is_truncated_and_appends_continue() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 0);
        let path = {
            let mut j = Journal::open(&s, T0).expect("open");
            for i in 1..=3 {
                j.append(T0, "t", false, &payload(i)).expect("append");
            }
            s.dir.join(&segment_names(&s.dir)[0])
        };
        let good_len = fs::metadata(&path).expect("meta").len();
        // A partial write: no newline.
        let mut f = OpenOptions::new().append(true).open(&path).expect("open");
        f.write_all(br#"{"seq":4,"ts_ms":17092"#).expect("write");
        drop(f);
        let mut j = Journal::open(&s, T0).expect("reopen");
        assert_eq!(fs::metadata(&path).expect("meta").len(), good_len);
        assert_eq!(j.last_seq(), 3);
        assert_eq!(j.stats().corrupt_lines, 1);
        assert_eq!(j.append(T0, "t", false, &payload(4)).expect("append"), 4);
        let all = j.read_after(0, 10).expect("read");
        assert_eq!(seqs(&all), vec![1, 2, 3, 4]);
        assert_eq!(all[3].payload, payload(4));
        drop(j);

        // Complete lines that are not valid JSON (zeros after a crash) go too.
        let mut f = OpenOptions::new().append(true).open(&path).expect("open");
        f.write_all(b"\0\0\0\0\n{\"seq\":5,\"ts_ms\":1,\n")
            .expect("write");
        drop(f);
        let mut j = Journal::open(&s, T0).expect("reopen");
        assert_eq!(j.stats().corrupt_lines, 2);
        assert_eq!(j.last_seq(), 4);
        assert_eq!(j.append(T0, "t", false, "{}").expect("append"), 5);
        assert_eq!(j.read_after(0, 10).expect("read").len(), 5);
    }

    #[test]
    fn corrupt_line_in_older_file_is_skipped_and_counted_once() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 250, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=5 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        let first = s.dir.join(&segment_names(&s.dir)[0]);
        let text = fs::read_to_string(&first).expect("read");
        // Damage the first line of the oldest segment, keeping its length.
        let damaged = text.replacen("\"seq\":1,", "\"seq\":1x", 1);
        assert_eq!(damaged.len(), text.len());
        fs::write(&first, damaged).expect("write");
        for _ in 0..2 {
            let all = j.read_after(0, 10).expect("read");
            assert_eq!(seqs(&all), vec![2, 3, 4, 5]);
        }
        assert_eq!(j.stats().corrupt_lines, 1);
    }

    #[test]
    fn mark_published_rate_limit_and_force() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 1000);
        let cursor = s.dir.join(PUBLISHED_FILE);
        let on_disk = || {
            fs::read_to_string(&cursor)
                .ok()
                .and_then(|t| t.trim().parse::<u64>().ok())
        };
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=5 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        j.mark_published(1, T0 + 10, false).expect("mark");
        assert_eq!(j.published_seq(), 1);
        assert_eq!(on_disk(), None, "within the interval of open");
        j.mark_published(2, T0 + 1000, false).expect("mark");
        assert_eq!(on_disk(), Some(2));
        j.mark_published(3, T0 + 1500, false).expect("mark");
        assert_eq!(on_disk(), Some(2));
        j.mark_published(4, T0 + 1600, true).expect("mark");
        assert_eq!(on_disk(), Some(4));
        // An older acknowledgement does not move the cursor back.
        j.mark_published(2, T0 + 5000, true).expect("mark");
        assert_eq!((j.published_seq(), on_disk()), (4, Some(4)));
        // Beyond the last appended record: refused.
        assert!(matches!(
            j.mark_published(6, T0 + 6000, true),
            Err(JournalError::CursorAhead {
                seq: 6,
                last: 5,
                ..
            })
        ));
        // sync writes what is pending.
        j.mark_published(5, T0 + 5500, false).expect("mark");
        assert_eq!(on_disk(), Some(4));
        j.sync().expect("sync");
        assert_eq!(on_disk(), Some(5));
        assert!(!s.dir.join(format!("{PUBLISHED_FILE}{TMP_SUFFIX}")).exists());
    }

    #[test]
    fn read_after_across_files_with_max() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 250, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for i in 1..=10 {
            j.append(T0, "t", false, &payload(i)).expect("append");
        }
        assert_eq!(j.stats().files, 5);
        assert_eq!(seqs(&j.read_after(3, 4).expect("read")), vec![4, 5, 6, 7]);
        assert_eq!(seqs(&j.read_after(0, 3).expect("read")), vec![1, 2, 3]);
        assert_eq!(seqs(&j.read_after(8, 100).expect("read")), vec![9, 10]);
        assert!(j.read_after(10, 100).expect("read").is_empty());
        // Segments entirely at or below `after` are not even opened.
        fs::remove_file(s.dir.join("eqwatch-20240301-000000000001.jsonl")).expect("rm");
        fs::write(
            s.dir.join("eqwatch-20240301-000000000003.jsonl"),
            "not json\nnot json\n",
        )
        .expect("write");
        assert_eq!(seqs(&j.read_after(4, 3).expect("read")), vec![5, 6, 7]);
        assert_eq!(j.stats().corrupt_lines, 0);
    }

    #[test]
    fn bad_payloads_are_refused() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 0);
        let mut j = Journal::open(&s, T0).expect("open");
        for bad in ["{\"a\":\n1}", "[1]", "", "{\"a\":1} ", "42"] {
            let err = j.append(T0, "t", false, bad).expect_err("refused");
            assert!(matches!(err, JournalError::BadPayload { .. }));
            assert!(err.to_string().contains("single line"), "{err}");
        }
        assert_eq!(j.last_seq(), 0);
        assert!(segment_names(&s.dir).is_empty());
        assert_eq!(j.append(T0, "t", false, "{}").expect("append"), 1);
    }

    #[test]
    fn bad_cursor_file_is_a_clear_error() {
        let tmp = tempfile::tempdir().expect("tempdir");
        let s = settings(tmp.path(), 1 << 20, 1 << 24, 0);
        fs::create_dir_all(&s.dir).expect("mkdir");
        fs::write(s.dir.join(PUBLISHED_FILE), "twelve\n").expect("write");
        let err = Journal::open(&s, T0).expect_err("bad cursor");
        let msg = err.to_string();
        assert!(
            msg.contains("published.seq") && msg.contains("delete"),
            "{msg}"
        );
    }

    #[test]
    fn segment_names_parse_strictly() {
        assert_eq!(
            parse_segment_name("eqwatch-20240229-000000000007.jsonl"),
            Some((days_from_civil(2024, 2, 29), 7))
        );
        for bad in [
            "eqwatch-20230229-000000000007.jsonl",
            "eqwatch-2024022-000000000007.jsonl",
            "eqwatch-20240229-.jsonl",
            "eqwatch-20240229-000000000000.jsonl",
            "eqwatch-20240229-00000000000x.jsonl",
            "other-20240229-000000000007.jsonl",
            "eqwatch-20240229-000000000007.jsonl.tmp",
        ] {
            assert_eq!(parse_segment_name(bad), None, "{bad}");
        }
    }

    #[test]
    fn hand_edited_line_layout_still_reads() {
        let line = br#"{ "retain": false, "payload": {"b": 2, "a": 1}, "topic": "x", "ts_ms": 5, "seq": 9 }"#;
        let rec = parse_line(line).expect("valid record");
        assert_eq!((rec.seq, rec.ts_ms, rec.retain), (9, 5, false));
        let reparsed: serde_json::Value = serde_json::from_str(&rec.payload).expect("json");
        assert_eq!(reparsed, serde_json::json!({"a": 1, "b": 2}));
        assert_eq!(quick_seq(line), None);
        assert_eq!(quick_seq(br#"{"seq":12,"ts_ms":1}"#), Some(12));
        assert!(
            parse_line(br#"{"seq":1,"ts_ms":1,"topic":"x","retain":true,"payload":[1]}"#).is_none()
        );
    }
}

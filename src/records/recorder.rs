//! Group commit. Handlers hand records to one writer thread; it takes everything waiting (up to
//! [`MAX_GROUP`]), writes it in one transaction, commits, and only then answers each handler. Under
//! load many decisions share one fsync, so durability costs little throughput; alone, a decision
//! waits for its own commit only.
//!
//! **The writer owns the deadline.** Each job carries the instant by which its records must be
//! committed or given up. A job whose deadline has passed before the writer starts it is answered
//! "not written" and never written; a started transaction waits for locks only until the group's
//! earliest deadline (the store enforces it) and is rolled back when it passes. The handler waits
//! for the writer's answer and never gives up on its own, so "not recorded" always means that the
//! store holds nothing of it, and a late commit is still reported as recorded.
//!
//! **One bad record fails only itself.** When a group fails on a statement (not a timeout or a
//! lost connection), each job is written again alone, and a job of several records each record
//! alone, so the others are kept.
//!
//! **Decisions on their way join the group.** A handler says when it starts deciding
//! ([`Recorder::expect`]); before committing, the writer waits for records still being decided,
//! a millisecond at most by default ([`GATHER`]), so that under load one sync serves several decisions
//! instead of one each (the costly part of a commit is the sync and the index pages, not the
//! record). A decision made alone is committed at once.

use super::{Insert, Record, Store, StoreError};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::Arc;
use std::time::{Duration, Instant};
use tokio::sync::{mpsc, oneshot};

/// Most records written in one transaction.
pub const MAX_GROUP: usize = 512;
/// Records waiting for the writer before handlers wait to hand theirs over.
const QUEUE: usize = 4_096;
/// Default for how long a decision may wait to be committed; after it, the decision is not
/// given (503) and not recorded. A hung database must not hold every request open.
pub const COMMIT_TIMEOUT: Duration = Duration::from_secs(10);
/// Default for how long the writer waits for decisions still being decided before it commits
/// the records it has (a few decisions' explanation on a large ensemble).
pub const GATHER: Duration = Duration::from_millis(1);
/// Consecutive failed commits after which the writer reports itself unhealthy...
const FAILING_AFTER: u64 = 3;
/// ...for this long after the last of them (then traffic may show whether it has recovered).
const FAILING_FOR: Duration = Duration::from_secs(30);

/// Each record handed back with what writing it did (moved through, never copied).
pub type Written = Vec<(Record, Result<Insert, StoreError>)>;

type Reply = oneshot::Sender<Written>;

/// A batch of records from one request, answered together.
struct Job {
    records: Vec<Record>,
    reply: Reply,
    deadline: Instant,
}

/// What readiness needs to know of the write path.
#[derive(Debug, Default)]
pub struct WriterHealth {
    stopped: AtomicBool,
    /// Consecutive failed commits, and when the last one failed.
    failing: std::sync::Mutex<(u64, Option<Instant>)>,
}

impl WriterHealth {
    /// Why the write path cannot be trusted to record decisions now, if it cannot.
    pub fn problem(&self) -> Option<String> {
        if self.stopped.load(Ordering::Acquire) {
            return Some("the recorder thread has stopped".into());
        }
        let (streak, last) = *self.failing.lock().ok()?;
        let recent = last.is_some_and(|t| t.elapsed() < FAILING_FOR);
        (streak >= FAILING_AFTER && recent).then(|| format!("the last {streak} commits failed"))
    }

    /// Why the writer thread is gone, if it is.
    pub fn stopped(&self) -> Option<String> {
        (self.stopped.load(Ordering::Acquire)).then(|| "the recorder thread has stopped".into())
    }

    fn commits(&self, ok: bool) {
        if let Ok(mut f) = self.failing.lock() {
            *f = if ok {
                (0, None)
            } else {
                (f.0 + 1, Some(Instant::now()))
            };
        }
    }
}

/// Marks the writer stopped however its thread ends (a panic included).
struct StoppedOnDrop(Arc<WriterHealth>);

impl Drop for StoppedOnDrop {
    fn drop(&mut self) {
        self.0.stopped.store(true, Ordering::Release);
        if std::thread::panicking() {
            tracing::error!("the decision recorder has stopped; liveness and readiness now fail");
        }
    }
}

/// Commits and the records they held, for the metrics (their ratio is the group size).
#[derive(Debug, Default)]
struct WriterStats {
    commits: AtomicU64,
    records: AtomicU64,
}

#[derive(Clone)]
pub struct Recorder {
    tx: mpsc::Sender<Job>,
    store: Arc<dyn Store>,
    health: Arc<WriterHealth>,
    stats: Arc<WriterStats>,
    /// Decisions being decided whose records are not handed over yet.
    expected: Arc<AtomicUsize>,
    commit_timeout: Duration,
}

/// A decision on its way to the recorder: counted from [`Recorder::expect`] until its records
/// are handed over ([`Recorder::record`]) or it is dropped (the decision failed).
pub struct Expected(Arc<AtomicUsize>);

impl Drop for Expected {
    fn drop(&mut self) {
        self.0.fetch_sub(1, Ordering::AcqRel);
    }
}

impl Recorder {
    /// Starts the writer thread; it ends when the last `Recorder` clone is dropped. `gather`:
    /// how long it may hold a commit for decisions still being decided (zero: never).
    pub fn start(store: Arc<dyn Store>, commit_timeout: Duration, gather: Duration) -> Recorder {
        let (tx, rx) = mpsc::channel::<Job>(QUEUE);
        let health = Arc::new(WriterHealth::default());
        let stats = Arc::new(WriterStats::default());
        let expected = Arc::new(AtomicUsize::new(0));
        let writer = Writer {
            gather,
            store: store.clone(),
            health: health.clone(),
            stats: stats.clone(),
            expected: expected.clone(),
        };
        std::thread::Builder::new()
            .name("plumbline-recorder".into())
            .spawn(move || writer.run(rx))
            .expect("the recorder thread starts");
        Recorder {
            tx,
            store,
            health,
            stats,
            expected,
            commit_timeout,
        }
    }

    /// Says a decision whose records will be handed over has started: the writer may wait for
    /// it (up to [`GATHER`]) to commit it with the others.
    pub fn expect(&self) -> Expected {
        self.expected.fetch_add(1, Ordering::AcqRel);
        Expected(self.expected.clone())
    }

    /// (commits, records they held) so far.
    pub fn stats(&self) -> (u64, u64) {
        let load = |n: &AtomicU64| n.load(Ordering::Relaxed);
        (load(&self.stats.commits), load(&self.stats.records))
    }

    pub fn store(&self) -> &Arc<dyn Store> {
        &self.store
    }

    pub fn health(&self) -> &WriterHealth {
        &self.health
    }

    /// Records `records` durably (one transaction with whatever else is waiting); resolves once
    /// the writer has answered, with each record and what writing it did, in order. A record
    /// answered with an error is not in the store; `Err` means none of them was handed over.
    /// `expected` (from [`Self::expect`]) stops counting once they are handed over.
    pub async fn record(
        &self,
        records: Vec<Record>,
        expected: Option<Expected>,
    ) -> Result<Written, StoreError> {
        let deadline = Instant::now() + self.commit_timeout;
        let (reply, answer) = oneshot::channel();
        let job = Job {
            records,
            reply,
            deadline,
        };
        // Handing over counts against the deadline; a job never handed over is not written.
        // No longer counted once queued: the writer takes it from the queue, and would otherwise
        // go on waiting, its whole gathering time, for a decision it already holds.
        drop(expected);
        match tokio::time::timeout_at(deadline.into(), self.tx.send(job)).await {
            Ok(Ok(())) => {}
            Ok(Err(_)) => return Err(stopped()),
            Err(_) => return Err(expired()),
        }
        // The writer answers every job it takes; a dropped reply means it stopped before
        // writing (a panic rolls its transaction back).
        answer.await.map_err(|_| stopped())
    }
}

fn stopped() -> StoreError {
    StoreError::Unavailable("the recorder has stopped".into())
}

fn expired() -> StoreError {
    StoreError::Timeout("no commit within the commit timeout".into())
}

/// The writer thread's parts.
struct Writer {
    gather: Duration,
    store: Arc<dyn Store>,
    health: Arc<WriterHealth>,
    stats: Arc<WriterStats>,
    expected: Arc<AtomicUsize>,
}

impl Writer {
    fn run(self, mut rx: mpsc::Receiver<Job>) {
        let _stopped = StoppedOnDrop(self.health.clone());
        // A clock for waiting on the queue with a time limit (the gathering below).
        let clock = tokio::runtime::Builder::new_current_thread()
            .enable_time()
            .build();
        while let Some(first) = rx.blocking_recv() {
            let mut group = Group::default();
            group.add(first);
            group.take_waiting(&mut rx);
            // Decisions still being decided join this commit, if they come in time.
            if let (Ok(clock), false) = (&clock, self.gather.is_zero()) {
                // Never past a held job's deadline: it would be refused for the waiting.
                let first_due = group.jobs.iter().map(|j| j.deadline).min();
                let until = (Instant::now() + self.gather).min(first_due.unwrap_or(Instant::now()));
                while group.has_room() && self.expected.load(Ordering::Acquire) > 0 {
                    // (The timer is made inside the clock's runtime: it needs its driver.)
                    let next = clock
                        .block_on(async { tokio::time::timeout_at(until.into(), rx.recv()).await });
                    let Ok(Some(job)) = next else { break };
                    group.add(job);
                    group.take_waiting(&mut rx);
                }
            }
            let jobs = group.jobs;
            // A panic while writing drops the group's replies (their handlers answer "not
            // recorded"; the transaction is rolled back as it unwinds) but not the writer.
            let written = catch_unwind(AssertUnwindSafe(|| {
                write_jobs(self.store.as_ref(), jobs, &self.health, &self.stats)
            }));
            if written.is_err() {
                tracing::error!("writing a group of decision records panicked; none was recorded");
                self.health.commits(false);
            }
        }
    }
}

/// The jobs of one commit and how many records they hold.
#[derive(Default)]
struct Group {
    jobs: Vec<Job>,
    records: usize,
}

impl Group {
    fn add(&mut self, job: Job) {
        self.records += job.records.len();
        self.jobs.push(job);
    }

    fn has_room(&self) -> bool {
        self.records < MAX_GROUP
    }

    /// Adds the jobs already queued, while there is room.
    fn take_waiting(&mut self, rx: &mut mpsc::Receiver<Job>) {
        while self.has_room() {
            match rx.try_recv() {
                Ok(job) => self.add(job),
                Err(_) => break,
            }
        }
    }
}

/// Writes the jobs: together while that works, the expired ones given up, the ones with time
/// left retried after a timeout, each on its own after a statement fails.
fn write_jobs(
    store: &dyn Store,
    mut pending: Vec<Job>,
    health: &WriterHealth,
    stats: &WriterStats,
) {
    loop {
        let now = Instant::now();
        let (live, late): (Vec<Job>, Vec<Job>) =
            (pending.into_iter()).partition(|j| j.deadline > now && !j.reply.is_closed());
        for job in late {
            answer(job.reply, job.records, |_| Err(expired()));
        }
        if live.is_empty() {
            return;
        }
        let deadline = live.iter().map(|j| j.deadline).min().unwrap_or(now);
        let mut counts = Vec::with_capacity(live.len());
        let mut replies = Vec::with_capacity(live.len());
        let mut all = Vec::new();
        for job in live {
            counts.push((job.records.len(), job.deadline));
            replies.push(job.reply);
            all.extend(job.records);
        }
        let result = store.write_group(&all, Some(deadline));
        health.commits(result.is_ok());
        if result.is_ok() {
            stats.commits.fetch_add(1, Ordering::Relaxed);
            stats.records.fetch_add(all.len() as u64, Ordering::Relaxed);
        }
        // Take the records back out, job by job, in order.
        let mut records = all.into_iter();
        let mut rebuilt = (counts.iter()).map(|&(n, d)| (records.by_ref().take(n).collect(), d));
        match result {
            Ok(outcomes) => {
                let mut outcomes = outcomes.into_iter();
                for (reply, (rs, _)) in replies.into_iter().zip(rebuilt.by_ref()) {
                    let rs: Vec<Record> = rs;
                    answer(reply, rs, |_| {
                        outcomes.next().ok_or_else(|| {
                            StoreError::Failed("the store gave too few outcomes".into())
                        })
                    });
                }
                return;
            }
            // The oldest job ran out of time: it is given up next round; the rest try again.
            Err(StoreError::Timeout(why)) => {
                tracing::warn!(reason = %why, "decision records waited past their deadline");
                pending = (replies.into_iter().zip(rebuilt))
                    .map(|(reply, (records, deadline))| Job {
                        records,
                        reply,
                        deadline,
                    })
                    .collect();
            }
            Err(StoreError::Failed(why)) if count_of(&counts) > 1 => {
                tracing::warn!(reason = %why, "a group of decision records failed; writing each alone");
                for (reply, (rs, deadline)) in replies.into_iter().zip(rebuilt) {
                    let rs: Vec<Record> = rs;
                    let outcomes = isolating(store, &rs, deadline, health);
                    let mut outcomes = outcomes.into_iter();
                    answer(reply, rs, |_| {
                        outcomes.next().unwrap_or_else(|| Err(expired()))
                    });
                }
                return;
            }
            Err(e) => {
                tracing::error!(error = %e, records = count_of(&counts), "decision records not written");
                for (reply, (rs, _)) in replies.into_iter().zip(rebuilt) {
                    let rs: Vec<Record> = rs;
                    answer(reply, rs, |_| Err(e.clone()));
                }
                return;
            }
        }
    }
}

fn count_of(counts: &[(usize, Instant)]) -> usize {
    counts.iter().map(|c| c.0).sum()
}

/// `records` in one transaction; if that fails on a statement and there are several, each
/// alone, so that a bad record fails only itself.
fn isolating(
    store: &dyn Store,
    records: &[Record],
    deadline: Instant,
    health: &WriterHealth,
) -> Vec<Result<Insert, StoreError>> {
    let result = store.write_group(records, Some(deadline));
    health.commits(result.is_ok());
    match result {
        Ok(out) => out.into_iter().map(Ok).collect(),
        Err(StoreError::Failed(why)) if records.len() > 1 => {
            tracing::warn!(reason = %why, records = records.len(), "writing each record alone");
            (records.iter())
                .flat_map(|r| isolating(store, std::slice::from_ref(r), deadline, health))
                .collect()
        }
        Err(e) => {
            if let StoreError::Failed(why) = &e {
                tracing::error!(reason = %why, "a decision record was refused by the store");
            }
            vec![Err(e); records.len()]
        }
    }
}

fn answer(
    reply: Reply,
    records: Vec<Record>,
    mut outcome: impl FnMut(&Record) -> Result<Insert, StoreError>,
) {
    let written = (records.into_iter())
        .map(|r| {
            let o = outcome(&r);
            (r, o)
        })
        .collect();
    let _ = reply.send(written);
}

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

use super::{Insert, Record, Store, StoreError};
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::atomic::{AtomicBool, Ordering};
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

#[derive(Clone)]
pub struct Recorder {
    tx: mpsc::Sender<Job>,
    store: Arc<dyn Store>,
    health: Arc<WriterHealth>,
    commit_timeout: Duration,
}

impl Recorder {
    /// Starts the writer thread; it ends when the last `Recorder` clone is dropped.
    pub fn start(store: Arc<dyn Store>, commit_timeout: Duration) -> Recorder {
        let (tx, rx) = mpsc::channel::<Job>(QUEUE);
        let health = Arc::new(WriterHealth::default());
        let (writer, watch) = (store.clone(), health.clone());
        std::thread::Builder::new()
            .name("plumbline-recorder".into())
            .spawn(move || run(writer.as_ref(), rx, watch))
            .expect("the recorder thread starts");
        Recorder {
            tx,
            store,
            health,
            commit_timeout,
        }
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
    pub async fn record(&self, records: Vec<Record>) -> Result<Written, StoreError> {
        let deadline = Instant::now() + self.commit_timeout;
        let (reply, answer) = oneshot::channel();
        let job = Job {
            records,
            reply,
            deadline,
        };
        // Handing over counts against the deadline; a job never handed over is not written.
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

fn run(store: &dyn Store, mut rx: mpsc::Receiver<Job>, health: Arc<WriterHealth>) {
    let _stopped = StoppedOnDrop(health.clone());
    while let Some(first) = rx.blocking_recv() {
        let mut jobs = vec![first];
        let mut count = jobs[0].records.len();
        while count < MAX_GROUP {
            match rx.try_recv() {
                Ok(job) => {
                    count += job.records.len();
                    jobs.push(job);
                }
                Err(_) => break,
            }
        }
        // A panic while writing drops the group's replies (their handlers answer "not
        // recorded"; the transaction is rolled back as it unwinds) but not the writer.
        if catch_unwind(AssertUnwindSafe(|| write_jobs(store, jobs, &health))).is_err() {
            tracing::error!("writing a group of decision records panicked; none was recorded");
            health.commits(false);
        }
    }
}

/// Writes the jobs: together while that works, the expired ones given up, the ones with time
/// left retried after a timeout, each on its own after a statement fails.
fn write_jobs(store: &dyn Store, mut pending: Vec<Job>, health: &WriterHealth) {
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

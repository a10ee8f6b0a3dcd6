//! Group commit. Handlers hand records to one writer thread; it takes everything waiting (up to
//! [`MAX_GROUP`]), writes it in one transaction, commits, and only then answers each handler. Under
//! load many decisions share one fsync, so durability costs little throughput; alone, a decision
//! waits for its own commit only.

use super::{Insert, Record, Store, StoreError};
use std::sync::Arc;
use tokio::sync::{mpsc, oneshot};

/// Most records written in one transaction.
pub const MAX_GROUP: usize = 512;
/// Records waiting for the writer before handlers wait to hand theirs over.
const QUEUE: usize = 4_096;
/// Longest a handler waits for its commit; after it, the decision is not given (503). A hung
/// database must not hold every request open.
pub const COMMIT_TIMEOUT: std::time::Duration = std::time::Duration::from_secs(10);

/// Each record handed back with what writing it did (moved through, never copied).
pub type Written = Vec<(Record, Insert)>;

type Reply = oneshot::Sender<Result<Written, StoreError>>;

/// A batch of records from one request, answered together.
struct Job {
    records: Vec<Record>,
    reply: Reply,
}

#[derive(Clone)]
pub struct Recorder {
    tx: mpsc::Sender<Job>,
    store: Arc<dyn Store>,
}

impl Recorder {
    /// Starts the writer thread; it ends when the last `Recorder` clone is dropped.
    pub fn start(store: Arc<dyn Store>) -> Recorder {
        let (tx, mut rx) = mpsc::channel::<Job>(QUEUE);
        let writer = store.clone();
        std::thread::Builder::new()
            .name("plumbline-recorder".into())
            .spawn(move || {
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
                    write_group(writer.as_ref(), jobs);
                }
            })
            .expect("the recorder thread starts");
        Recorder { tx, store }
    }

    pub fn store(&self) -> &Arc<dyn Store> {
        &self.store
    }

    /// Records `records` durably (one transaction with whatever else is waiting); resolves once
    /// committed, with each record and its outcome, in order.
    pub async fn record(&self, records: Vec<Record>) -> Result<Written, StoreError> {
        let (reply, answer) = oneshot::channel();
        let stopped = || StoreError::Unavailable("the recorder has stopped".into());
        let waited = tokio::time::timeout(COMMIT_TIMEOUT, async {
            self.tx
                .send(Job { records, reply })
                .await
                .map_err(|_| stopped())?;
            answer.await.map_err(|_| stopped())?
        })
        .await;
        waited.unwrap_or_else(|_| {
            Err(StoreError::Unavailable(format!(
                "no commit within {} s",
                COMMIT_TIMEOUT.as_secs()
            )))
        })
    }
}

fn write_group(store: &dyn Store, jobs: Vec<Job>) {
    let mut all: Vec<Record> = Vec::new();
    let mut replies: Vec<(usize, Reply)> = Vec::with_capacity(jobs.len());
    for job in jobs {
        replies.push((job.records.len(), job.reply));
        all.extend(job.records);
    }
    match store.insert_group(&all) {
        Ok(outcomes) => {
            let mut written = all.into_iter().zip(outcomes);
            for (n, reply) in replies {
                let _ = reply.send(Ok(written.by_ref().take(n).collect()));
            }
        }
        Err(e) => {
            tracing::error!(error = %e, records = all.len(), "decision records not written");
            for (_, reply) in replies {
                let _ = reply.send(Err(e.clone()));
            }
        }
    }
}

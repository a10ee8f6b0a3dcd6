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

type Reply = oneshot::Sender<Result<Vec<Insert>, StoreError>>;

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
    /// committed, with one outcome per record in order.
    pub async fn record(&self, records: Vec<Record>) -> Result<Vec<Insert>, StoreError> {
        let (reply, answer) = oneshot::channel();
        self.tx
            .send(Job { records, reply })
            .await
            .map_err(|_| StoreError::Unavailable("the recorder has stopped".into()))?;
        answer
            .await
            .map_err(|_| StoreError::Unavailable("the recorder has stopped".into()))?
    }
}

fn write_group(store: &dyn Store, jobs: Vec<Job>) {
    let all: Vec<Record> = jobs
        .iter()
        .flat_map(|j| j.records.iter().cloned())
        .collect();
    match store.insert_group(&all) {
        Ok(outcomes) => {
            let mut outcomes = outcomes.into_iter();
            for job in jobs {
                let mine: Vec<Insert> = outcomes.by_ref().take(job.records.len()).collect();
                let _ = job.reply.send(Ok(mine));
            }
        }
        Err(e) => {
            tracing::error!(error = %e, records = all.len(), "decision records not written");
            for job in jobs {
                let _ = job.reply.send(Err(e.clone()));
            }
        }
    }
}

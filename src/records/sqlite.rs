//! The embedded default store: one SQLite file in WAL mode with `synchronous = FULL`, so a
//! committed group survives power loss. One write connection (the recorder's), a small pool
//! of read connections.

use super::observed::{self, DecisionWithOutcome, ObservedOutcome, OutcomeInsert};
use super::sql::{self, MIGRATIONS, MIGRATIONS_TABLE};
use super::{FinalAction, FinalInsert, Insert, Page, Query, Record, Store, StoreError};
use rusqlite::{params, Connection, OptionalExtension};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::{Duration, Instant};

/// How long a statement waits for another connection's lock when no deadline is given.
const BUSY_WAIT: Duration = Duration::from_secs(10);
/// How long a readiness probe waits for the write lock.
const PROBE_WAIT: Duration = Duration::from_secs(1);

pub struct SqliteStore {
    path: PathBuf,
    writer: Mutex<Connection>,
    readers: super::pool::Readers<Connection>,
    /// Stopped and joined with the store.
    _checkpointer: Option<Checkpointer>,
}

/// How often the checkpointer copies committed pages from the write-ahead log into the file.
const CHECKPOINT_EVERY: Duration = Duration::from_millis(200);

/// Copies committed pages from the write-ahead log into the database file, on its own
/// connection and thread, so that the writer never does it inside a commit: SQLite's automatic
/// checkpoint runs in the committing connection and held every decision of that group (several
/// milliseconds for a thousand pages). Passive: it never waits for readers or the writer, and
/// what it cannot copy yet it copies next time. Stopped and joined when dropped (after the
/// store's other connections): its connection, the last, is closed and has removed the log by
/// the time the store is gone.
struct Checkpointer {
    stop: Option<std::sync::mpsc::Sender<()>>,
    thread: Option<std::thread::JoinHandle<()>>,
}

/// While copying keeps failing, the failure is logged again at most this often.
const CHECKPOINT_WARN_EVERY: Duration = Duration::from_secs(60);

impl Checkpointer {
    fn start(path: &Path) -> Option<Checkpointer> {
        let c = connect(path).ok()?;
        let (tx, stop) = std::sync::mpsc::channel::<()>();
        let thread = std::thread::Builder::new()
            .name("plumbline-checkpoint".into())
            .spawn(move || {
                // A failing copy is logged when it starts failing, then once a minute, and
                // when it works again: the log grows meanwhile, and an operator should know.
                let mut failing_since: Option<Instant> = None;
                let mut warned = Instant::now();
                while let Err(std::sync::mpsc::RecvTimeoutError::Timeout) =
                    stop.recv_timeout(CHECKPOINT_EVERY)
                {
                    match c.query_row("PRAGMA wal_checkpoint(PASSIVE)", [], |_| Ok(())) {
                        Ok(()) => {
                            if let Some(since) = failing_since.take() {
                                let secs = since.elapsed().as_secs();
                                tracing::info!(failed_for_s = secs, "the write-ahead log is copied into the database again");
                            }
                        }
                        Err(e) => {
                            let first = failing_since.is_none();
                            if first || warned.elapsed() >= CHECKPOINT_WARN_EVERY {
                                tracing::warn!(error = %e, "copying the write-ahead log into the database failed; the log grows until it works");
                                warned = Instant::now();
                            }
                            failing_since.get_or_insert_with(Instant::now);
                        }
                    }
                }
            })
            .ok()?;
        Some(Checkpointer {
            stop: Some(tx),
            thread: Some(thread),
        })
    }
}

impl Drop for Checkpointer {
    fn drop(&mut self) {
        drop(self.stop.take());
        if let Some(thread) = self.thread.take() {
            let _ = thread.join();
        }
    }
}

fn failed(e: rusqlite::Error) -> StoreError {
    match e.sqlite_error_code() {
        Some(rusqlite::ErrorCode::DatabaseBusy | rusqlite::ErrorCode::DatabaseLocked) => {
            StoreError::Timeout(format!("the database is locked by another writer ({e})"))
        }
        _ => StoreError::Failed(e.to_string()),
    }
}

/// Begins a write transaction, waiting for another writer's lock until `deadline` at most.
fn begin(
    c: &mut Connection,
    deadline: Option<Instant>,
) -> Result<rusqlite::Transaction<'_>, StoreError> {
    let wait = match deadline {
        Some(d) => d.saturating_duration_since(Instant::now()),
        None => BUSY_WAIT,
    };
    if wait.is_zero() {
        return Err(StoreError::Timeout(
            "the deadline passed before the write began".into(),
        ));
    }
    // Once the write lock is held, WAL-mode inserts and the commit wait for no one else.
    c.busy_timeout(wait).map_err(failed)?;
    c.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)
        .map_err(failed)
}

fn connect(path: &Path) -> Result<Connection, StoreError> {
    let c = Connection::open(path)
        .map_err(|e| StoreError::Unavailable(format!("{}: {e}", path.display())))?;
    c.busy_timeout(BUSY_WAIT).map_err(failed)?;
    c.pragma_update(None, "journal_mode", "WAL")
        .map_err(failed)?;
    c.pragma_update(None, "synchronous", "FULL")
        .map_err(failed)?;
    Ok(c)
}

/// Creates a new store's folder (0700) and file (0600) for its owner alone: records hold
/// applicants' financial data. An existing file or folder keeps the permissions it has; SQLite
/// gives its `-wal` and `-shm` files the database file's.
fn create_private(path: &Path) -> Result<(), StoreError> {
    let unavailable =
        |p: &Path, e: std::io::Error| StoreError::Unavailable(format!("{}: {e}", p.display()));
    if let Some(dir) = path
        .parent()
        .filter(|d| !d.as_os_str().is_empty() && !d.exists())
    {
        let mut builder = std::fs::DirBuilder::new();
        builder.recursive(true);
        #[cfg(unix)]
        std::os::unix::fs::DirBuilderExt::mode(&mut builder, 0o700);
        builder.create(dir).map_err(|e| unavailable(dir, e))?;
    }
    if !path.exists() {
        let mut options = std::fs::OpenOptions::new();
        options.write(true).create_new(true);
        #[cfg(unix)]
        std::os::unix::fs::OpenOptionsExt::mode(&mut options, 0o600);
        match options.open(path) {
            Ok(_) => {}
            // Created meanwhile by another process: it is that one's to set.
            Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => {}
            Err(e) => return Err(unavailable(path, e)),
        }
    }
    Ok(())
}

/// The final action in column `i`, refused (as a conversion failure) if it is not one of the
/// three.
fn action_at(r: &rusqlite::Row, i: usize) -> rusqlite::Result<super::ActionTaken> {
    let name: String = r.get(i)?;
    super::ActionTaken::from_name(&name).ok_or_else(|| {
        let why = format!("final action {name:?} is not approve, decline or withdrawn");
        rusqlite::Error::FromSqlConversionFailure(i, rusqlite::types::Type::Text, why.into())
    })
}

/// The outcome in column `i`, refused (as a conversion failure) if it is not one of the three.
fn outcome_at(r: &rusqlite::Row, i: usize) -> rusqlite::Result<super::Outcome> {
    let name: String = r.get(i)?;
    super::Outcome::from_name(&name).ok_or_else(|| {
        let why = format!("outcome {name:?} is not approve, refer or decline");
        rusqlite::Error::FromSqlConversionFailure(i, rusqlite::types::Type::Text, why.into())
    })
}

fn row_to_record(r: &rusqlite::Row) -> rusqlite::Result<Record> {
    Ok(Record {
        decision_id: r.get(0)?,
        application_id: r.get(1)?,
        idempotency_key: r.get(2)?,
        received_at: r.get(3)?,
        decided_at: r.get(4)?,
        model_id: r.get(5)?,
        model_version: r.get(6)?,
        model_sha256: r.get(7)?,
        plumbline_version: r.get(8)?,
        request_sha256: r.get(9)?,
        outcome: outcome_at(r, 10)?,
        probability: r.get(11)?,
        score: r.get(12)?,
        request: r.get(13)?,
        response: r.get(14)?,
        requested_by: r.get(15)?,
        final_action: match r.get::<_, Option<String>>(16)? {
            None => None,
            Some(_) => Some(super::FinalAction {
                decision_id: r.get(0)?,
                action: action_at(r, 16)?,
                reasons: r.get(17)?,
                note: r.get(18)?,
                decided_by: r.get(19)?,
                decided_at: r.get(20)?,
                idempotency_key: r.get(21)?,
                body_sha256: r.get(22)?,
            }),
        },
    })
}

fn row_with_outcome(r: &rusqlite::Row) -> rusqlite::Result<DecisionWithOutcome> {
    let observed = match r.get::<_, Option<i64>>(7)? {
        None => None,
        Some(d) => Some((d == 1, r.get(8)?)),
    };
    Ok(DecisionWithOutcome {
        decision_id: r.get(0)?,
        decided_at: r.get(1)?,
        model_version: r.get(2)?,
        outcome: outcome_at(r, 3)?,
        probability: r.get(4)?,
        score: r.get(5)?,
        final_action: r.get(6)?,
        observed,
    })
}

impl SqliteStore {
    /// Opens (creating if needed) the file and its folder, and applies pending migrations.
    pub fn open(path: &Path) -> Result<Self, StoreError> {
        create_private(path)?;
        let mut writer = connect(path)?;
        migrate(&mut writer)?;
        // Checkpoints run on their own thread; where it cannot start, the writer keeps SQLite's
        // automatic checkpoint (every 1,000 pages).
        let checkpointer = Checkpointer::start(path);
        if checkpointer.is_some() {
            writer
                .pragma_update(None, "wal_autocheckpoint", 0)
                .map_err(failed)?;
        }
        Ok(SqliteStore {
            path: path.to_path_buf(),
            writer: Mutex::new(writer),
            readers: super::pool::Readers::default(),
            _checkpointer: checkpointer,
        })
    }

    fn with_reader<T>(
        &self,
        f: impl FnOnce(&Connection) -> Result<T, StoreError>,
    ) -> Result<T, StoreError> {
        let conn = self.readers.take(|_| true, || connect(&self.path))?;
        let out = f(&conn);
        self.readers.give_back(conn, true);
        out
    }
}

impl SqliteStore {
    /// Rows of `text` read one at a time, each as `convert` makes it, handed to `sink` until it
    /// returns false: how many were sent.
    fn stream<T>(
        &self,
        text: &str,
        params: &[String],
        convert: fn(&rusqlite::Row) -> rusqlite::Result<T>,
        sink: &mut dyn FnMut(&T) -> bool,
    ) -> Result<u64, StoreError> {
        self.with_reader(|c| {
            let mut stmt = c.prepare(&sql::for_sqlite(text)).map_err(failed)?;
            let mut rows = stmt
                .query(rusqlite::params_from_iter(params.iter()))
                .map_err(failed)?;
            let mut sent = 0;
            while let Some(row) = rows.next().map_err(failed)? {
                if !sink(&convert(row).map_err(failed)?) {
                    break;
                }
                sent += 1;
            }
            Ok(sent)
        })
    }
}

fn migrate(c: &mut Connection) -> Result<(), StoreError> {
    let tx = c
        .transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)
        .map_err(failed)?;
    tx.execute_batch(MIGRATIONS_TABLE).map_err(failed)?;
    let done: i64 = tx
        .query_row(
            "SELECT COALESCE(MAX(version), 0) FROM plumbline_migrations",
            [],
            |r| r.get(0),
        )
        .map_err(failed)?;
    for m in MIGRATIONS.iter().filter(|m| m.version > done) {
        // SQLite compares text bytewise by default and has no collation named "C".
        tx.execute_batch(&m.for_sqlite()).map_err(failed)?;
        tx.execute(
            "INSERT INTO plumbline_migrations (version, about, applied_at) VALUES (?1, ?2, ?3)",
            params![m.version, m.about, super::now()],
        )
        .map_err(failed)?;
    }
    tx.commit().map_err(failed)
}

/// The record with this decision id, if any.
fn by_id(c: &Connection, id: &str) -> Result<Option<Record>, StoreError> {
    c.query_row(
        &sql::for_sqlite(&sql::select_one(sql::Key::DecisionId)),
        [id],
        row_to_record,
    )
    .optional()
    .map_err(failed)
}

/// The record `requested_by` made with idempotency key `key`, if any.
fn by_key(c: &Connection, requested_by: &str, key: &str) -> Result<Option<Record>, StoreError> {
    c.query_row(
        &sql::for_sqlite(&sql::select_one(sql::Key::IdempotencyKey)),
        [key, requested_by],
        row_to_record,
    )
    .optional()
    .map_err(failed)
}

impl Store for SqliteStore {
    fn write_group(
        &self,
        records: &[Record],
        deadline: Option<Instant>,
    ) -> Result<Vec<Insert>, StoreError> {
        let mut c = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        let tx = begin(&mut c, deadline)?;
        let mut out = Vec::with_capacity(records.len());
        {
            let mut insert = tx
                .prepare_cached(&sql::for_sqlite(sql::INSERT))
                .map_err(failed)?;
            for r in records {
                let written = insert
                    .execute(params![
                        r.decision_id,
                        r.application_id,
                        r.idempotency_key,
                        r.received_at,
                        r.decided_at,
                        r.model_id,
                        r.model_version,
                        r.model_sha256,
                        r.plumbline_version,
                        r.request_sha256,
                        r.outcome.name(),
                        r.probability,
                        r.score,
                        r.request,
                        r.response,
                        r.requested_by
                    ])
                    .map_err(failed)?;
                out.push(match (written, &r.idempotency_key) {
                    (1, _) => Insert::Inserted,
                    (_, Some(key)) => match by_key(&tx, &r.requested_by, key)? {
                        Some(existing) => Insert::Existing(Box::new(existing)),
                        None => return Err(StoreError::Failed("conflict without a record".into())),
                    },
                    (_, None) => return Err(StoreError::Failed("record not written".into())),
                });
            }
        }
        tx.commit().map_err(failed)?;
        Ok(out)
    }

    fn find_key(&self, requested_by: &str, key: &str) -> Result<Option<Record>, StoreError> {
        self.with_reader(|c| by_key(c, requested_by, key))
    }

    fn log_access(&self, e: &super::Access) -> Result<(), StoreError> {
        let mut c = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        let tx = begin(&mut c, None)?;
        tx.execute(
            &sql::for_sqlite(sql::INSERT_ACCESS),
            params![
                e.access_id,
                e.at,
                e.caller,
                e.role,
                e.action,
                e.target,
                e.records,
                e.request_id
            ],
        )
        .map_err(failed)?;
        tx.commit().map_err(failed)
    }

    fn access_log(
        &self,
        from: &str,
        to: &str,
        after: Option<(&str, &str)>,
        limit: usize,
    ) -> Result<Vec<super::Access>, StoreError> {
        let (at, id) = after.unwrap_or(("", ""));
        self.with_reader(|c| {
            let mut stmt = c
                .prepare_cached(&sql::for_sqlite(sql::SELECT_ACCESS))
                .map_err(failed)?;
            let rows = stmt
                .query_map(params![from, to, at, id, limit as i64], |r| {
                    Ok(super::Access {
                        access_id: r.get(0)?,
                        at: r.get(1)?,
                        caller: r.get(2)?,
                        role: r.get(3)?,
                        action: r.get(4)?,
                        target: r.get(5)?,
                        records: r.get(6)?,
                        request_id: r.get(7)?,
                    })
                })
                .map_err(failed)?;
            rows.collect::<Result<Vec<_>, _>>().map_err(failed)
        })
    }

    fn insert_final_action(&self, a: &FinalAction) -> Result<FinalInsert, StoreError> {
        let mut c = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        let tx = begin(&mut c, None)?;
        let written = tx
            .execute(
                &sql::for_sqlite(sql::INSERT_FINAL),
                params![
                    a.decision_id,
                    a.action.name(),
                    a.reasons,
                    a.note,
                    a.decided_by,
                    a.decided_at,
                    a.idempotency_key,
                    a.body_sha256
                ],
            )
            .map_err(failed)?;
        let out = if written == 1 {
            FinalInsert::Inserted
        } else {
            let existing = by_id(&tx, &a.decision_id)?
                .and_then(|r| r.final_action)
                .ok_or_else(|| StoreError::Failed("conflict without a final action".into()))?;
            FinalInsert::Existing(existing)
        };
        tx.commit().map_err(failed)?;
        Ok(out)
    }

    fn get(&self, decision_id: &str) -> Result<Option<Record>, StoreError> {
        self.with_reader(|c| by_id(c, decision_id))
    }

    fn search(&self, query: &Query, limit: usize) -> Result<Page, StoreError> {
        let limit = limit.clamp(1, super::MAX_PAGE);
        let (text, params) = sql::select(query, Some(limit + 1));
        self.with_reader(|c| {
            let mut stmt = c.prepare(&sql::for_sqlite(&text)).map_err(failed)?;
            let records: Vec<Record> = stmt
                .query_map(rusqlite::params_from_iter(params.iter()), row_to_record)
                .map_err(failed)?
                .collect::<Result<_, _>>()
                .map_err(failed)?;
            Ok(Page::cut(records, limit))
        })
    }

    fn export(
        &self,
        query: &Query,
        sink: &mut dyn FnMut(&Record) -> bool,
    ) -> Result<u64, StoreError> {
        let (text, params) = sql::select(query, None);
        self.stream(&text, &params, row_to_record, sink)
    }

    fn insert_outcomes(&self, rows: &[ObservedOutcome]) -> Result<Vec<OutcomeInsert>, StoreError> {
        let same_as = observed::firsts(rows);
        let mut written = vec![None; rows.len()];
        let mut c = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        let tx = begin(&mut c, None)?;
        {
            let mut insert =
                (tx.prepare_cached(&sql::for_sqlite(sql::INSERT_OUTCOME))).map_err(failed)?;
            let mut stored =
                (tx.prepare_cached(&sql::for_sqlite(sql::SELECT_OUTCOME))).map_err(failed)?;
            for (i, r) in rows.iter().enumerate() {
                if same_as[i].is_some() {
                    continue;
                }
                let n = insert
                    .execute(params![
                        r.application_id,
                        i64::from(r.defaulted),
                        r.observed_at,
                        r.loaded_at,
                        r.loaded_by
                    ])
                    .map_err(failed)?;
                written[i] = Some(if n == 1 {
                    OutcomeInsert::Inserted
                } else {
                    let kept = stored
                        .query_row([&r.application_id], |row| {
                            Ok((row.get::<_, i64>(0)? == 1, row.get::<_, String>(1)?))
                        })
                        .optional()
                        .map_err(failed)?;
                    match kept {
                        None => OutcomeInsert::UnknownApplication,
                        Some((kept, kept_at)) => {
                            observed::compare((kept, &kept_at), r.defaulted, &r.observed_at)
                        }
                    }
                });
            }
        }
        tx.commit().map_err(failed)?;
        Ok(observed::settle(rows, &same_as, written))
    }

    fn with_outcomes(
        &self,
        query: &Query,
        sink: &mut dyn FnMut(&DecisionWithOutcome) -> bool,
    ) -> Result<u64, StoreError> {
        let (text, params) = sql::select_with_outcomes(query);
        self.stream(&text, &params, row_with_outcome, sink)
    }

    fn probe_write(&self) -> Result<(), StoreError> {
        let mut c = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        // Taking the write lock proves the file is writable and not held; nothing is written.
        let tx = begin(&mut c, Some(Instant::now() + PROBE_WAIT))?;
        tx.rollback().map_err(failed)
    }

    fn describe(&self) -> String {
        format!("sqlite:{}", self.path.display())
    }
}

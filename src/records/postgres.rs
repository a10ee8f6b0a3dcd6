//! The shared store for several service replicas: one PostgreSQL database. A decision is
//! committed before its response is sent; the unique idempotency key makes a retry sent to any
//! replica find the first record. Migrations run under an advisory lock, so replicas starting
//! together apply each exactly once.
//!
//! Every wait on the server is bounded on our side, since a server that stops answering (a
//! paused process, a network partition) keeps TCP alive and would block forever: connections
//! get connect, keepalive and TCP user timeouts (unless the URL sets its own), reads a time
//! limit per step, and a group write its deadline up to the commit. A commit asked for is then
//! waited for; if its connection breaks, the writer reconnects, makes sure the old server
//! process is gone, and looks for the records, so an answer is "committed" or "not committed"
//! as the database holds it, and "unknown" only when the database stays out of reach.
//!
//! Built on `tokio-postgres` with a runtime of the store's own: callers (the recorder thread,
//! the blocking pool, the command line) block on it, never an async worker.

use super::observed::{self, DecisionWithOutcome, ObservedOutcome, OutcomeInsert};
use super::sql::{self, MIGRATIONS, MIGRATIONS_TABLE};
use super::{FinalAction, FinalInsert, Insert, Page, Query, Record, Store, StoreError};
use futures_util::{pin_mut, TryStreamExt};
use std::future::Future;
use std::sync::Mutex;
use std::time::{Duration, Instant};
use tokio::task::AbortHandle;
use tokio_postgres::config::SslMode;
use tokio_postgres::types::ToSql;
use tokio_postgres::{Client, Config, Row};
use tokio_postgres_rustls::MakeRustlsConnect;

/// Key of the advisory lock held while migrating (any constant shared by all replicas).
const MIGRATION_LOCK: i64 = 0x706c_756d_626c;
/// Longest wait for one read step (a look-up, a page, the next rows of an export).
const READ_STEP: Duration = Duration::from_secs(30);
/// Longest wait for a new connection, the startup exchange included (the driver's own connect
/// timeout covers the TCP connect only).
const CONNECT_WAIT: Duration = Duration::from_secs(10);
/// Longest wait for a write with no deadline of its own (final actions, migrations).
const WRITE_WAIT: Duration = Duration::from_secs(30);
/// How long a commit asked for is waited for before its outcome is looked up instead.
const COMMIT_WAIT: Duration = Duration::from_secs(30);
/// How long the writer keeps trying to establish a broken commit's outcome.
const SETTLE_WAIT: Duration = Duration::from_secs(60);

/// Connection settings applied unless the URL gives its own: a partition is noticed in tens of
/// seconds, not the operating system's two hours.
fn apply_defaults(url: &str, c: &mut Config) {
    let unset = |name: &str| !url.contains(name);
    if unset("connect_timeout") {
        c.connect_timeout(Duration::from_secs(5));
    }
    if unset("keepalives_idle") {
        c.keepalives_idle(Duration::from_secs(10));
    }
    if unset("keepalives_interval") {
        c.keepalives_interval(Duration::from_secs(5));
    }
    if unset("keepalives_retries") {
        c.keepalives_retries(3);
    }
    if unset("tcp_user_timeout") {
        c.tcp_user_timeout(Duration::from_secs(20));
    }
}

/// An error with its causes ("error performing TLS handshake: invalid peer certificate: …").
fn causes(e: &dyn std::error::Error) -> String {
    let mut text = e.to_string();
    let mut next = e.source();
    while let Some(cause) = next {
        let more = cause.to_string();
        if !text.ends_with(&more) {
            text = format!("{text}: {more}");
        }
        next = cause.source();
    }
    text
}

/// One connection: the client, its server process (for settling a broken commit) and the task
/// that drives it (aborted to drop a connection that stopped answering).
struct Conn {
    client: Client,
    pid: i32,
    task: AbortHandle,
}

impl Conn {
    fn usable(&self) -> bool {
        !self.client.is_closed() && !self.task.is_finished()
    }
}

impl Drop for Conn {
    fn drop(&mut self) {
        self.task.abort();
    }
}

pub struct PostgresStore {
    config: Config,
    /// TLS as the URL's `sslmode` asks (see `crate::tls::postgres_url`).
    connector: MakeRustlsConnect,
    described: String,
    /// `Some` until dropped (on a thread of its own: a runtime cannot be dropped in an async
    /// context, and the last reference to a store may be dropped in one).
    rt: Option<tokio::runtime::Runtime>,
    writer: Mutex<Option<Conn>>,
    readers: super::pool::Readers<Conn>,
}

fn failed(e: tokio_postgres::Error) -> StoreError {
    match e.as_db_error() {
        // The server answered: the statement (and its transaction) failed.
        Some(d) => StoreError::Failed(format!("{} ({})", d.message(), d.code().code())),
        None if e.is_closed() => StoreError::Unavailable(format!("connection closed: {e}")),
        None => StoreError::Unavailable(e.to_string()),
    }
}

fn stalled(what: &str, after: Duration) -> StoreError {
    StoreError::Timeout(format!(
        "{what}: no answer from the server within {} ms",
        after.as_millis()
    ))
}

/// Runs `f` against the deadline; a late one is a timeout (the caller drops the connection).
async fn within<T>(
    deadline: Instant,
    what: &str,
    f: impl Future<Output = Result<T, StoreError>>,
) -> Result<T, StoreError> {
    let allowed = deadline.saturating_duration_since(Instant::now());
    tokio::time::timeout_at(deadline.into(), f)
        .await
        .unwrap_or_else(|_| Err(stalled(what, allowed)))
}

fn row_to_record(r: &Row) -> Result<Record, StoreError> {
    let get = |i: usize| -> Result<String, StoreError> { r.try_get(i).map_err(failed) };
    Ok(Record {
        decision_id: get(0)?,
        application_id: get(1)?,
        idempotency_key: r.try_get(2).map_err(failed)?,
        received_at: get(3)?,
        decided_at: get(4)?,
        model_id: get(5)?,
        model_version: get(6)?,
        model_sha256: get(7)?,
        plumbline_version: get(8)?,
        request_sha256: get(9)?,
        outcome: {
            let name = get(10)?;
            super::Outcome::from_name(&name).ok_or_else(|| {
                StoreError::Failed(format!("outcome {name:?} is not approve, refer or decline"))
            })?
        },
        probability: r.try_get(11).map_err(failed)?,
        score: r.try_get(12).map_err(failed)?,
        request: get(13)?,
        response: get(14)?,
        requested_by: get(15)?,
        final_action: match r.try_get::<_, Option<String>>(16).map_err(failed)? {
            None => None,
            Some(name) => Some(FinalAction {
                decision_id: get(0)?,
                action: super::ActionTaken::from_name(&name).ok_or_else(|| {
                    StoreError::Failed(format!(
                        "final action {name:?} is not approve, decline or withdrawn"
                    ))
                })?,
                reasons: get(17)?,
                note: get(18)?,
                decided_by: get(19)?,
                decided_at: get(20)?,
                idempotency_key: r.try_get(21).map_err(failed)?,
                body_sha256: get(22)?,
            }),
        },
    })
}

fn row_with_outcome(r: &Row) -> Result<DecisionWithOutcome, StoreError> {
    let name: String = r.try_get(3).map_err(failed)?;
    let observed = match r.try_get::<_, Option<i64>>(7).map_err(failed)? {
        None => None,
        Some(d) => Some((d == 1, r.try_get(8).map_err(failed)?)),
    };
    Ok(DecisionWithOutcome {
        decision_id: r.try_get(0).map_err(failed)?,
        decided_at: r.try_get(1).map_err(failed)?,
        model_version: r.try_get(2).map_err(failed)?,
        outcome: super::Outcome::from_name(&name).ok_or_else(|| {
            StoreError::Failed(format!("outcome {name:?} is not approve, refer or decline"))
        })?,
        probability: r.try_get(4).map_err(failed)?,
        score: r.try_get(5).map_err(failed)?,
        final_action: r.try_get(6).map_err(failed)?,
        observed,
    })
}

/// Writes a group of outcomes in one transaction: one INSERT of the whole group from arrays
/// (`unnest`), which names the rows it wrote, then one look-up of what is stored for the rest.
async fn write_outcomes(
    c: &mut Client,
    rows: &[ObservedOutcome],
) -> Result<Vec<OutcomeInsert>, StoreError> {
    let same_as = observed::firsts(rows);
    let firsts: Vec<&ObservedOutcome> = (rows.iter().zip(&same_as))
        .filter(|(_, s)| s.is_none())
        .map(|(r, _)| r)
        .collect();
    let column =
        |f: fn(&ObservedOutcome) -> &str| -> Vec<&str> { firsts.iter().map(|r| f(r)).collect() };
    let ids = column(|r| &r.application_id);
    let flags: Vec<i64> = firsts.iter().map(|r| i64::from(r.defaulted)).collect();
    let (observed_at, loaded_at, loaded_by) = (
        column(|r| &r.observed_at),
        column(|r| &r.loaded_at),
        column(|r| &r.loaded_by),
    );
    let tx = c.transaction().await.map_err(failed)?;
    let inserted: std::collections::HashSet<String> = tx
        .query(
            sql::INSERT_OUTCOMES_PG,
            &[&ids, &flags, &observed_at, &loaded_at, &loaded_by],
        )
        .await
        .map_err(failed)?
        .iter()
        .map(|row| row.try_get::<_, String>(0))
        .collect::<Result<_, _>>()
        .map_err(failed)?;
    let rest: Vec<&str> = (ids.iter().copied())
        .filter(|id| !inserted.contains(*id))
        .collect();
    let kept: std::collections::HashMap<String, (bool, String)> = tx
        .query(sql::SELECT_OUTCOMES_PG, &[&rest])
        .await
        .map_err(failed)?
        .iter()
        .map(|row| {
            let d: i64 = row.try_get(1)?;
            Ok((row.try_get(0)?, (d == 1, row.try_get(2)?)))
        })
        .collect::<Result<_, tokio_postgres::Error>>()
        .map_err(failed)?;
    tx.commit().await.map_err(failed)?;
    let written = (rows.iter().zip(&same_as))
        .map(|(r, s)| {
            s.is_none().then(|| {
                if inserted.contains(&r.application_id) {
                    return OutcomeInsert::Inserted;
                }
                match kept.get(&r.application_id) {
                    None => OutcomeInsert::UnknownApplication,
                    Some((d, at)) => observed::compare((*d, at), r.defaulted, &r.observed_at),
                }
            })
        })
        .collect();
    Ok(observed::settle(rows, &same_as, written))
}

fn text_params(params: &[String]) -> Vec<&(dyn ToSql + Sync)> {
    params.iter().map(|p| p as &(dyn ToSql + Sync)).collect()
}

/// The stored name of an outcome, as a parameter that lives as long as the record's others.
fn outcome_name(o: super::Outcome) -> &'static &'static str {
    match o {
        super::Outcome::Approve => &"approve",
        super::Outcome::Refer => &"refer",
        super::Outcome::Decline => &"decline",
    }
}

fn record_params(r: &Record) -> [&(dyn ToSql + Sync); 16] {
    [
        &r.decision_id,
        &r.application_id,
        &r.idempotency_key,
        &r.received_at,
        &r.decided_at,
        &r.model_id,
        &r.model_version,
        &r.model_sha256,
        &r.plumbline_version,
        &r.request_sha256,
        outcome_name(r.outcome),
        &r.probability,
        &r.score,
        &r.request,
        &r.response,
        &r.requested_by,
    ]
}

/// The record with this decision id, if any (on a client or in a transaction).
async fn by_id(
    c: &impl tokio_postgres::GenericClient,
    id: &str,
) -> Result<Option<Record>, StoreError> {
    let select = sql::select_one(sql::Key::DecisionId);
    let rows = c.query(&select, &[&id]).await.map_err(failed)?;
    rows.first().map(row_to_record).transpose()
}

/// The record `requested_by` made with idempotency key `key`, if any.
async fn by_key(
    c: &impl tokio_postgres::GenericClient,
    requested_by: &str,
    key: &str,
) -> Result<Option<Record>, StoreError> {
    let select = sql::select_one(sql::Key::IdempotencyKey);
    let rows = c
        .query(&select, &[&key, &requested_by])
        .await
        .map_err(failed)?;
    rows.first().map(row_to_record).transpose()
}

async fn migrate(c: &mut Client) -> Result<(), StoreError> {
    let tx = c.transaction().await.map_err(failed)?;
    tx.execute("SELECT pg_advisory_xact_lock($1)", &[&MIGRATION_LOCK])
        .await
        .map_err(failed)?;
    tx.batch_execute(MIGRATIONS_TABLE).await.map_err(failed)?;
    let done: i64 = tx
        .query_one(
            "SELECT COALESCE(MAX(version), 0)::BIGINT FROM plumbline_migrations",
            &[],
        )
        .await
        .map_err(failed)?
        .get(0);
    for m in MIGRATIONS.iter().filter(|m| m.version > done) {
        tx.batch_execute(m.sql).await.map_err(failed)?;
        tx.execute(
            "INSERT INTO plumbline_migrations (version, about, applied_at) VALUES ($1, $2, $3)",
            &[&m.version, &m.about, &super::now()],
        )
        .await
        .map_err(failed)?;
    }
    tx.commit().await.map_err(failed)
}

/// What a group write got to: the inserts' outcomes, the ids it inserted (to look for if the
/// commit's answer is lost), and whether the commit was asked for.
enum Attempt {
    Committed(Vec<Insert>),
    Refused(StoreError),
    /// The commit was sent and its answer did not come back.
    Broken(Vec<Insert>, Vec<String>, StoreError),
}

impl PostgresStore {
    /// Connects, and applies pending migrations.
    pub fn open(url: &str) -> Result<Self, StoreError> {
        let (url, tls) = crate::tls::postgres_url(url).map_err(StoreError::Unavailable)?;
        let mut config: Config = url
            .parse()
            .map_err(|e| StoreError::Unavailable(format!("not a PostgreSQL URL: {e}")))?;
        apply_defaults(&url, &mut config);
        config.ssl_mode(match tls.mode {
            crate::tls::Use::Never => SslMode::Disable,
            crate::tls::Use::IfOffered => SslMode::Prefer,
            crate::tls::Use::Always => SslMode::Require,
        });
        let roots = crate::tls::roots(tls.roots.as_deref()).map_err(StoreError::Unavailable)?;
        let connector = MakeRustlsConnect::new(
            crate::tls::client_config(roots, tls.check).map_err(StoreError::Unavailable)?,
        );
        let rt = tokio::runtime::Builder::new_multi_thread()
            .worker_threads(1)
            .thread_name("plumbline-postgres")
            .enable_all()
            .build()
            .map_err(|e| {
                StoreError::Unavailable(format!("cannot start the client runtime: {e}"))
            })?;
        let store = PostgresStore {
            described: describe(&config),
            config,
            connector,
            rt: Some(rt),
            writer: Mutex::new(None),
            readers: super::pool::Readers::default(),
        };
        let mut conn = store.connect()?;
        store.block_on(within(
            Instant::now() + WRITE_WAIT,
            "migrating",
            migrate(&mut conn.client),
        ))?;
        *store.writer.lock().map_err(|_| poisoned())? = Some(conn);
        Ok(store)
    }

    fn block_on<F: Future>(&self, f: F) -> F::Output {
        self.rt.as_ref().expect("runtime until drop").block_on(f)
    }

    fn connect(&self) -> Result<Conn, StoreError> {
        self.connect_by(Instant::now() + CONNECT_WAIT)
    }

    /// A new connection, given up at `deadline`.
    fn connect_by(&self, deadline: Instant) -> Result<Conn, StoreError> {
        let config = self.config.clone();
        let connector = self.connector.clone();
        let rt = self.rt.as_ref().expect("runtime until drop");
        let (client, connection) = self.block_on(within(deadline, "connecting", async {
            (config.connect(connector).await)
                .map_err(|e| StoreError::Unavailable(format!("cannot connect: {}", causes(&e))))
        }))?;
        let task = rt
            .spawn(async move {
                if let Err(e) = connection.await {
                    tracing::debug!(error = %e, "a PostgreSQL connection ended");
                }
            })
            .abort_handle();
        let pid = self.block_on(within(deadline, "connecting", async {
            let row = (client.query_one("SELECT pg_backend_pid()", &[]).await).map_err(failed)?;
            Ok(row.get::<_, i32>(0))
        }));
        // Built first so that a failed query still aborts the connection's task.
        let mut conn = Conn {
            client,
            pid: 0,
            task,
        };
        conn.pid = pid?;
        Ok(conn)
    }

    /// An idle read connection, or a new one (at most `pool::MOST_READERS` open).
    fn reader(&self) -> Result<Conn, StoreError> {
        self.readers.take(Conn::usable, || self.connect())
    }

    /// Keeps a read connection for reuse, unless its work erred or stalled.
    fn give_back<T>(&self, conn: Conn, out: Result<T, StoreError>) -> Result<T, StoreError> {
        let keep = out.is_ok() && conn.usable();
        self.readers.give_back(conn, keep);
        out
    }

    /// The writer connection, reconnected (by `deadline`) if it was lost or dropped after an
    /// error.
    fn writer(
        &self,
        deadline: Instant,
    ) -> Result<std::sync::MutexGuard<'_, Option<Conn>>, StoreError> {
        let mut guard = self.writer.lock().map_err(|_| poisoned())?;
        if !guard.as_ref().is_some_and(Conn::usable) {
            *guard = None;
            *guard = Some(self.connect_by(deadline)?);
        }
        Ok(guard)
    }

    /// Once a commit's answer was lost: waits until the old server process is gone (asking it
    /// to end), then looks for the inserted records. All or none of them are there.
    fn settle(&self, old_pid: i32, inserted: &[String]) -> Result<bool, StoreError> {
        let until = Instant::now() + SETTLE_WAIT;
        let mut last = String::new();
        while Instant::now() < until {
            let attempt = self.connect().and_then(|conn| {
                self.block_on(within(
                    Instant::now() + READ_STEP,
                    "settling a commit",
                    async {
                        let c = &conn.client;
                        c.execute("SELECT pg_terminate_backend($1)", &[&old_pid])
                            .await
                            .map_err(failed)?;
                        let alive: i64 = c
                            .query_one(
                                "SELECT COUNT(*) FROM pg_stat_activity WHERE pid = $1",
                                &[&old_pid],
                            )
                            .await
                            .map_err(failed)?
                            .get(0);
                        if alive > 0 {
                            return Ok(None);
                        }
                        let found: i64 = c
                            .query_one(
                                "SELECT COUNT(*) FROM decisions WHERE decision_id = ANY($1)",
                                &[&inserted],
                            )
                            .await
                            .map_err(failed)?
                            .get(0);
                        Ok(Some(found as usize == inserted.len()))
                    },
                ))
            });
            match attempt {
                Ok(Some(committed)) => return Ok(committed),
                Ok(None) => last = format!("server process {old_pid} is still running"),
                Err(e) => last = e.to_string(),
            }
            std::thread::sleep(Duration::from_millis(200));
        }
        Err(StoreError::Unknown(format!(
            "the commit's answer was lost and its outcome could not be established within {} s ({last})",
            SETTLE_WAIT.as_secs()
        )))
    }
}

impl PostgresStore {
    /// Rows of `text` as the server sends them (nothing collected), each as `convert` makes it,
    /// handed to `sink` until it returns false: how many were sent. Each step (the query, then
    /// every row) must arrive within the read limit; `what` names the wait in a timeout.
    fn stream<T>(
        &self,
        text: &str,
        params: &[String],
        what: &str,
        convert: fn(&Row) -> Result<T, StoreError>,
        sink: &mut dyn FnMut(&T) -> bool,
    ) -> Result<u64, StoreError> {
        let conn = self.reader()?;
        let c = &conn.client;
        let out = self.block_on(async {
            let rows = within(Instant::now() + READ_STEP, what, async {
                (c.query_raw(text, params.iter().map(|p| p as &(dyn ToSql + Sync)))
                    .await)
                    .map_err(failed)
            })
            .await?;
            pin_mut!(rows);
            let mut sent = 0;
            loop {
                let next = within(Instant::now() + READ_STEP, what, async {
                    rows.try_next().await.map_err(failed)
                })
                .await?;
                let Some(row) = next else { break };
                if !sink(&convert(&row)?) {
                    break;
                }
                sent += 1;
            }
            Ok(sent)
        });
        self.give_back(conn, out)
    }
}

fn poisoned() -> StoreError {
    StoreError::Failed("writer lock poisoned".into())
}

/// Host, port and database: never the user or password.
fn describe(c: &Config) -> String {
    let host = match c.get_hosts().first() {
        Some(tokio_postgres::config::Host::Tcp(h)) => h.clone(),
        Some(tokio_postgres::config::Host::Unix(p)) => p.display().to_string(),
        None => "localhost".into(),
    };
    let port = c.get_ports().first().copied().unwrap_or(5432);
    format!("postgres:{host}:{port}/{}", c.get_dbname().unwrap_or(""))
}

impl Drop for PostgresStore {
    fn drop(&mut self) {
        let writer = self.writer.get_mut().ok().and_then(Option::take);
        let readers = self.readers.drain();
        let rt = self.rt.take();
        let _ = std::thread::spawn(move || drop((writer, readers, rt))).join();
    }
}

/// Inserts the group up to the commit within `deadline`, then asks for the commit.
async fn attempt_group(c: &mut Client, records: &[Record], deadline: Instant) -> Attempt {
    let before = within(deadline, "writing decision records", async {
        let tx = c.transaction().await.map_err(failed)?;
        // The server gives up too, should our side not notice first.
        let ms = deadline
            .saturating_duration_since(Instant::now())
            .as_millis()
            .max(1);
        tx.batch_execute(&format!(
            "SET LOCAL statement_timeout = {ms}; SET LOCAL lock_timeout = {ms}"
        ))
        .await
        .map_err(failed)?;
        let insert = tx.prepare(sql::INSERT).await.map_err(failed)?;
        let mut out = Vec::with_capacity(records.len());
        let mut inserted = Vec::new();
        for r in records {
            let written = tx
                .execute(&insert, &record_params(r))
                .await
                .map_err(failed)?;
            out.push(match (written, &r.idempotency_key) {
                (1, _) => {
                    inserted.push(r.decision_id.clone());
                    Insert::Inserted
                }
                (_, Some(key)) => match by_key(&tx, &r.requested_by, key).await? {
                    Some(existing) => Insert::Existing(Box::new(existing)),
                    None => return Err(StoreError::Failed("conflict without a record".into())),
                },
                (_, None) => return Err(StoreError::Failed("record not written".into())),
            });
        }
        if Instant::now() >= deadline {
            return Err(stalled("writing decision records", Duration::ZERO));
        }
        Ok((tx, out, inserted))
    })
    .await;
    let (tx, out, inserted) = match before {
        Ok(parts) => parts,
        Err(e) => return Attempt::Refused(e),
    };
    match tokio::time::timeout(COMMIT_WAIT, tx.commit()).await {
        Ok(Ok(())) => Attempt::Committed(out),
        // The server answered no: nothing was committed.
        Ok(Err(e)) if e.as_db_error().is_some() => Attempt::Refused(failed(e)),
        Ok(Err(e)) => Attempt::Broken(out, inserted, failed(e)),
        Err(_) => Attempt::Broken(out, inserted, stalled("committing", COMMIT_WAIT)),
    }
}

impl Store for PostgresStore {
    fn write_group(
        &self,
        records: &[Record],
        deadline: Option<Instant>,
    ) -> Result<Vec<Insert>, StoreError> {
        let deadline = deadline.unwrap_or_else(|| Instant::now() + WRITE_WAIT);
        if Instant::now() >= deadline {
            return Err(stalled("writing decision records", Duration::ZERO));
        }
        let mut guard = self.writer(deadline)?;
        let conn = guard
            .as_mut()
            .ok_or_else(|| StoreError::Unavailable("no connection".into()))?;
        let pid = conn.pid;
        match self.block_on(attempt_group(&mut conn.client, records, deadline)) {
            Attempt::Committed(out) => Ok(out),
            Attempt::Refused(e) => {
                // A connection that stalled or broke is not trusted again.
                if !matches!(e, StoreError::Failed(_)) {
                    *guard = None;
                }
                Err(e)
            }
            Attempt::Broken(out, inserted, e) => {
                *guard = None;
                tracing::warn!(error = %e, "a commit's answer was lost; establishing its outcome");
                if inserted.is_empty() || self.settle(pid, &inserted)? {
                    Ok(out)
                } else {
                    Err(StoreError::Unavailable(format!(
                        "the commit did not happen: {e}"
                    )))
                }
            }
        }
    }

    fn find_key(&self, requested_by: &str, key: &str) -> Result<Option<Record>, StoreError> {
        let conn = self.reader()?;
        let out = self.block_on(within(
            Instant::now() + READ_STEP,
            "looking up a key",
            async { by_key(&conn.client, requested_by, key).await },
        ));
        self.give_back(conn, out)
    }

    fn log_access(&self, e: &super::Access) -> Result<(), StoreError> {
        let mut guard = self.writer(Instant::now() + CONNECT_WAIT)?;
        let conn = guard
            .as_mut()
            .ok_or_else(|| StoreError::Unavailable("no connection".into()))?;
        let params: [&(dyn ToSql + Sync); 8] = [
            &e.access_id,
            &e.at,
            &e.caller,
            &e.role,
            &e.action,
            &e.target,
            &e.records,
            &e.request_id,
        ];
        let out = self.block_on(within(
            Instant::now() + WRITE_WAIT,
            "logging an access",
            async {
                (conn.client.execute(sql::INSERT_ACCESS, &params).await)
                    .map(|_| ())
                    .map_err(failed)
            },
        ));
        if matches!(
            out,
            Err(StoreError::Timeout(_) | StoreError::Unavailable(_))
        ) {
            *guard = None;
        }
        out
    }

    fn access_log(
        &self,
        from: &str,
        to: &str,
        after: Option<(&str, &str)>,
        limit: usize,
    ) -> Result<Vec<super::Access>, StoreError> {
        let (at, id) = after.unwrap_or(("", ""));
        let limit = limit as i64;
        let conn = self.reader()?;
        let out = self.block_on(within(
            Instant::now() + READ_STEP,
            "reading the access log",
            async {
                let params: [&(dyn ToSql + Sync); 5] = [&from, &to, &at, &id, &limit];
                let rows =
                    (conn.client.query(sql::SELECT_ACCESS, &params).await).map_err(failed)?;
                rows.iter()
                    .map(|r| {
                        Ok(super::Access {
                            access_id: r.try_get(0).map_err(failed)?,
                            at: r.try_get(1).map_err(failed)?,
                            caller: r.try_get(2).map_err(failed)?,
                            role: r.try_get(3).map_err(failed)?,
                            action: r.try_get(4).map_err(failed)?,
                            target: r.try_get(5).map_err(failed)?,
                            records: r.try_get(6).map_err(failed)?,
                            request_id: r.try_get(7).map_err(failed)?,
                        })
                    })
                    .collect()
            },
        ));
        self.give_back(conn, out)
    }

    fn insert_final_action(&self, a: &FinalAction) -> Result<FinalInsert, StoreError> {
        let mut guard = self.writer(Instant::now() + CONNECT_WAIT)?;
        let conn = guard
            .as_mut()
            .ok_or_else(|| StoreError::Unavailable("no connection".into()))?;
        let out = self.block_on(within(
            Instant::now() + WRITE_WAIT,
            "recording a final action",
            async {
                let tx = conn.client.transaction().await.map_err(failed)?;
                let written = tx
                    .execute(
                        sql::INSERT_FINAL,
                        &[
                            &a.decision_id,
                            &a.action.name(),
                            &a.reasons,
                            &a.note,
                            &a.decided_by,
                            &a.decided_at,
                            &a.idempotency_key,
                            &a.body_sha256,
                        ],
                    )
                    .await
                    .map_err(failed)?;
                let out = if written == 1 {
                    FinalInsert::Inserted
                } else {
                    let existing = by_id(&tx, &a.decision_id)
                        .await?
                        .and_then(|r| r.final_action)
                        .ok_or_else(|| {
                            StoreError::Failed("conflict without a final action".into())
                        })?;
                    FinalInsert::Existing(existing)
                };
                tx.commit().await.map_err(failed)?;
                Ok(out)
            },
        ));
        if matches!(
            out,
            Err(StoreError::Timeout(_) | StoreError::Unavailable(_))
        ) {
            *guard = None;
        }
        out
    }

    fn get(&self, decision_id: &str) -> Result<Option<Record>, StoreError> {
        let conn = self.reader()?;
        let out = self.block_on(within(
            Instant::now() + READ_STEP,
            "looking up a decision",
            async { by_id(&conn.client, decision_id).await },
        ));
        self.give_back(conn, out)
    }

    fn search(&self, query: &Query, limit: usize) -> Result<Page, StoreError> {
        let limit = limit.clamp(1, super::MAX_PAGE);
        let (text, params) = sql::select(query, Some(limit + 1));
        let conn = self.reader()?;
        let out = self.block_on(within(Instant::now() + READ_STEP, "searching", async {
            let rows = (conn.client.query(&text, &text_params(&params)).await).map_err(failed)?;
            let records = rows
                .iter()
                .map(row_to_record)
                .collect::<Result<Vec<_>, _>>()?;
            Ok(Page::cut(records, limit))
        }));
        self.give_back(conn, out)
    }

    fn export(
        &self,
        query: &Query,
        sink: &mut dyn FnMut(&Record) -> bool,
    ) -> Result<u64, StoreError> {
        let (text, params) = sql::select(query, None);
        self.stream(&text, &params, "exporting", row_to_record, sink)
    }

    fn insert_outcomes(&self, rows: &[ObservedOutcome]) -> Result<Vec<OutcomeInsert>, StoreError> {
        let mut guard = self.writer(Instant::now() + CONNECT_WAIT)?;
        let conn = guard
            .as_mut()
            .ok_or_else(|| StoreError::Unavailable("no connection".into()))?;
        let out = self.block_on(within(
            Instant::now() + WRITE_WAIT,
            "loading outcomes",
            write_outcomes(&mut conn.client, rows),
        ));
        if matches!(
            out,
            Err(StoreError::Timeout(_) | StoreError::Unavailable(_))
        ) {
            *guard = None;
        }
        out
    }

    fn with_outcomes(
        &self,
        query: &Query,
        sink: &mut dyn FnMut(&DecisionWithOutcome) -> bool,
    ) -> Result<u64, StoreError> {
        let (text, params) = sql::select_with_outcomes(query);
        self.stream(&text, &params, "reading outcomes", row_with_outcome, sink)
    }

    fn probe_write(&self) -> Result<(), StoreError> {
        let conn = self.reader()?;
        let out = self.block_on(within(Instant::now() + READ_STEP, "probing", async {
            let row = (conn.client)
                .query_one(
                    "SELECT pg_is_in_recovery(), current_setting('transaction_read_only')",
                    &[],
                )
                .await
                .map_err(failed)?;
            let (standby, read_only): (bool, String) = (row.get(0), row.get(1));
            match (standby, read_only.as_str()) {
                (true, _) => Err(StoreError::Unavailable(
                    "the database is a standby (read-only)".into(),
                )),
                (_, "on") => Err(StoreError::Unavailable("the database is read-only".into())),
                _ => Ok(()),
            }
        }));
        self.give_back(conn, out)
    }

    fn describe(&self) -> String {
        self.described.clone()
    }
}

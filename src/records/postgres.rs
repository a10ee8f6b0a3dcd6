//! The shared store for several service replicas: one PostgreSQL database. A decision is
//! committed before its response is sent; the unique idempotency key makes a retry sent to any
//! replica find the first record. Migrations run under an advisory lock, so replicas starting
//! together apply each exactly once.
//!
//! The client is the synchronous `postgres` crate; it is called only from the recorder thread and
//! the blocking pool, never from an async worker.

use super::sql::{self, MIGRATIONS, MIGRATIONS_TABLE};
use super::{FinalAction, FinalInsert, Insert, Page, Query, Record, Store, StoreError};
use postgres::fallible_iterator::FallibleIterator;
use postgres::types::ToSql;
use postgres::{Client, NoTls, Row};
use std::sync::Mutex;

/// Read connections kept open for reuse.
const IDLE_READERS: usize = 8;
/// Key of the advisory lock held while migrating (any constant shared by all replicas).
const MIGRATION_LOCK: i64 = 0x706c_756d_626c;

pub struct PostgresStore {
    url: String,
    writer: Mutex<Option<Client>>,
    readers: Mutex<Vec<Client>>,
}

fn failed(e: postgres::Error) -> StoreError {
    if e.is_closed() {
        StoreError::Unavailable(e.to_string())
    } else {
        StoreError::Failed(format!(
            "{e}{}",
            e.as_db_error()
                .map(|d| format!(" ({})", d.message()))
                .unwrap_or_default()
        ))
    }
}

fn connect(url: &str) -> Result<Client, StoreError> {
    Client::connect(url, NoTls).map_err(|e| StoreError::Unavailable(format!("cannot connect: {e}")))
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
        outcome: get(10)?,
        probability: r.try_get(11).map_err(failed)?,
        score: r.try_get(12).map_err(failed)?,
        request: get(13)?,
        response: get(14)?,
        final_action: match r.try_get::<_, Option<String>>(15).map_err(failed)? {
            None => None,
            Some(action) => Some(super::FinalAction {
                decision_id: get(0)?,
                action,
                reasons: get(16)?,
                note: get(17)?,
                decided_by: get(18)?,
                decided_at: get(19)?,
                idempotency_key: r.try_get(20).map_err(failed)?,
                body_sha256: get(21)?,
            }),
        },
    })
}

fn migrate(c: &mut Client) -> Result<(), StoreError> {
    let mut tx = c.transaction().map_err(failed)?;
    tx.execute("SELECT pg_advisory_xact_lock($1)", &[&MIGRATION_LOCK])
        .map_err(failed)?;
    tx.batch_execute(MIGRATIONS_TABLE).map_err(failed)?;
    let done: i64 = tx
        .query_one(
            "SELECT COALESCE(MAX(version), 0)::BIGINT FROM plumbline_migrations",
            &[],
        )
        .map_err(failed)?
        .get(0);
    for m in MIGRATIONS.iter().filter(|m| m.version > done) {
        tx.batch_execute(m.sql).map_err(failed)?;
        tx.execute(
            "INSERT INTO plumbline_migrations (version, about, applied_at) VALUES ($1, $2, $3)",
            &[&m.version, &m.about, &super::now()],
        )
        .map_err(failed)?;
    }
    tx.commit().map_err(failed)
}

fn text_params(params: &[String]) -> Vec<&(dyn ToSql + Sync)> {
    params.iter().map(|p| p as &(dyn ToSql + Sync)).collect()
}

impl PostgresStore {
    /// Connects, and applies pending migrations.
    pub fn open(url: &str) -> Result<Self, StoreError> {
        let mut writer = connect(url)?;
        migrate(&mut writer)?;
        Ok(PostgresStore {
            url: url.to_string(),
            writer: Mutex::new(Some(writer)),
            readers: Mutex::new(Vec::new()),
        })
    }

    fn with_reader<T>(
        &self,
        f: impl FnOnce(&mut Client) -> Result<T, StoreError>,
    ) -> Result<T, StoreError> {
        let idle = self.readers.lock().ok().and_then(|mut v| v.pop());
        let mut conn = match idle {
            Some(c) if !c.is_closed() => c,
            _ => connect(&self.url)?,
        };
        let out = f(&mut conn);
        if let Ok(mut v) = self.readers.lock() {
            if v.len() < IDLE_READERS && !conn.is_closed() {
                v.push(conn);
            }
        }
        out
    }
}

/// The synchronous client closes its connection by blocking on its own runtime, which panics
/// inside an async context; the last reference to a store may well be dropped in one (a server
/// worker shutting down), so the clients are closed on a thread of their own.
impl Drop for PostgresStore {
    fn drop(&mut self) {
        let writer = self.writer.get_mut().ok().and_then(Option::take);
        let readers = self
            .readers
            .get_mut()
            .map(std::mem::take)
            .unwrap_or_default();
        let _ = std::thread::spawn(move || drop((writer, readers))).join();
    }
}

/// The record whose `key` column equals `value`, if any (on a client or in a transaction).
fn one(
    c: &mut impl postgres::GenericClient,
    key: sql::Key,
    value: &str,
) -> Result<Option<Record>, StoreError> {
    let rows = c.query(&sql::select_one(key), &[&value]).map_err(failed)?;
    rows.first().map(row_to_record).transpose()
}

impl Store for PostgresStore {
    fn insert_group(&self, records: &[Record]) -> Result<Vec<Insert>, StoreError> {
        let mut guard = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        if guard.as_ref().is_none_or(Client::is_closed) {
            *guard = Some(connect(&self.url)?);
        }
        let Some(client) = guard.as_mut() else {
            return Err(StoreError::Unavailable("no connection".into()));
        };
        let mut tx = client.transaction().map_err(failed)?;
        let insert = tx.prepare(sql::INSERT).map_err(failed)?;
        let mut out = Vec::with_capacity(records.len());
        for r in records {
            let written = tx
                .execute(
                    &insert,
                    &[
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
                        &r.outcome,
                        &r.probability,
                        &r.score,
                        &r.request,
                        &r.response,
                    ],
                )
                .map_err(failed)?;
            out.push(match (written, &r.idempotency_key) {
                (1, _) => Insert::Inserted,
                (_, Some(key)) => match one(&mut tx, sql::Key::IdempotencyKey, key)? {
                    Some(existing) => Insert::Existing(Box::new(existing)),
                    None => return Err(StoreError::Failed("conflict without a record".into())),
                },
                (_, None) => return Err(StoreError::Failed("record not written".into())),
            });
        }
        tx.commit().map_err(failed)?;
        Ok(out)
    }

    fn find_key(&self, key: &str) -> Result<Option<Record>, StoreError> {
        self.with_reader(|c| one(c, sql::Key::IdempotencyKey, key))
    }

    fn insert_final_action(&self, a: &FinalAction) -> Result<FinalInsert, StoreError> {
        let mut guard = self
            .writer
            .lock()
            .map_err(|_| StoreError::Failed("writer lock poisoned".into()))?;
        if guard.as_ref().is_none_or(Client::is_closed) {
            *guard = Some(connect(&self.url)?);
        }
        let Some(client) = guard.as_mut() else {
            return Err(StoreError::Unavailable("no connection".into()));
        };
        let mut tx = client.transaction().map_err(failed)?;
        let written = tx
            .execute(
                sql::INSERT_FINAL,
                &[
                    &a.decision_id,
                    &a.action,
                    &a.reasons,
                    &a.note,
                    &a.decided_by,
                    &a.decided_at,
                    &a.idempotency_key,
                    &a.body_sha256,
                ],
            )
            .map_err(failed)?;
        let out = if written == 1 {
            FinalInsert::Inserted
        } else {
            let existing = one(&mut tx, sql::Key::DecisionId, &a.decision_id)?
                .and_then(|r| r.final_action)
                .ok_or_else(|| StoreError::Failed("conflict without a final action".into()))?;
            FinalInsert::Existing(existing)
        };
        tx.commit().map_err(failed)?;
        Ok(out)
    }

    fn get(&self, decision_id: &str) -> Result<Option<Record>, StoreError> {
        self.with_reader(|c| one(c, sql::Key::DecisionId, decision_id))
    }

    fn search(&self, query: &Query, limit: usize) -> Result<Page, StoreError> {
        let limit = limit.clamp(1, super::MAX_PAGE);
        let (text, params) = sql::select(query, Some(limit + 1));
        self.with_reader(|c| {
            let rows = c.query(&text, &text_params(&params)).map_err(failed)?;
            let records = rows
                .iter()
                .map(row_to_record)
                .collect::<Result<Vec<_>, _>>()?;
            Ok(Page::cut(records, limit))
        })
    }

    fn export(
        &self,
        query: &Query,
        sink: &mut dyn FnMut(&Record) -> bool,
    ) -> Result<u64, StoreError> {
        let (text, params) = sql::select(query, None);
        self.with_reader(|c| {
            // query_raw streams rows as the server sends them; nothing is collected.
            let mut rows = c
                .query_raw(&text, params.iter().map(|p| p as &(dyn ToSql + Sync)))
                .map_err(failed)?;
            let mut sent = 0;
            while let Some(row) = rows.next().map_err(failed)? {
                if !sink(&row_to_record(&row)?) {
                    break;
                }
                sent += 1;
            }
            Ok(sent)
        })
    }

    fn describe(&self) -> String {
        // Never the password: host, port and database only.
        let config: Result<postgres::Config, _> = self.url.parse();
        let Ok(c) = config else {
            return "postgres".into();
        };
        let host = match c.get_hosts().first() {
            Some(postgres::config::Host::Tcp(h)) => h.clone(),
            Some(postgres::config::Host::Unix(p)) => p.display().to_string(),
            None => "localhost".into(),
        };
        let port = c.get_ports().first().copied().unwrap_or(5432);
        format!("postgres:{host}:{port}/{}", c.get_dbname().unwrap_or(""))
    }
}

//! SQL shared by both back ends: versioned migrations and the search filter. Placeholders are
//! written `$1`, `$2`, ... (PostgreSQL); SQLite reads them as `?1`, `?2`, ... via [`for_sqlite`].

/// Migrations in order; version n is `MIGRATIONS[n - 1]`. Never edit an applied one: add one.
/// Text columns that are compared or ordered use byte order (`COLLATE "C"` on PostgreSQL; SQLite's
/// default BINARY), so fixed-width RFC 3339 times sort as times.
pub const MIGRATIONS: &[Migration] = &[
    Migration {
        version: 1,
        about: "decision records",
        sql: "CREATE TABLE decisions (
        decision_id TEXT COLLATE \"C\" PRIMARY KEY,
        application_id TEXT COLLATE \"C\" NOT NULL,
        idempotency_key TEXT COLLATE \"C\" UNIQUE,
        received_at TEXT COLLATE \"C\" NOT NULL,
        decided_at TEXT COLLATE \"C\" NOT NULL,
        model_id TEXT COLLATE \"C\" NOT NULL,
        model_version TEXT COLLATE \"C\" NOT NULL,
        model_sha256 TEXT NOT NULL,
        plumbline_version TEXT NOT NULL,
        request_sha256 TEXT NOT NULL,
        outcome TEXT COLLATE \"C\" NOT NULL,
        probability DOUBLE PRECISION NOT NULL,
        score BIGINT NOT NULL,
        request TEXT NOT NULL,
        response TEXT NOT NULL
    );
    CREATE INDEX decisions_by_time ON decisions (decided_at, decision_id);
    CREATE INDEX decisions_by_application ON decisions (application_id, decided_at, decision_id);",
    },
    Migration {
        version: 2,
        about: "final actions on referred decisions",
        // Append-only beside the decision: one per decision, never updated (no code path does).
        sql: "CREATE TABLE final_actions (
        decision_id TEXT COLLATE \"C\" PRIMARY KEY REFERENCES decisions (decision_id),
        action TEXT COLLATE \"C\" NOT NULL,
        reasons TEXT NOT NULL,
        note TEXT NOT NULL,
        decided_by TEXT NOT NULL,
        decided_at TEXT COLLATE \"C\" NOT NULL,
        idempotency_key TEXT COLLATE \"C\",
        body_sha256 TEXT NOT NULL
    );
    CREATE INDEX final_actions_by_time ON final_actions (decided_at);",
    },
];

pub struct Migration {
    pub version: i64,
    pub about: &'static str,
    pub sql: &'static str,
}

/// The bookkeeping table, created before any migration runs.
pub const MIGRATIONS_TABLE: &str = "CREATE TABLE IF NOT EXISTS plumbline_migrations (
    version BIGINT PRIMARY KEY, about TEXT NOT NULL, applied_at TEXT NOT NULL)";

/// Every column of a record, in [`super::Record`] field order, then its final action's (all
/// NULL when none is recorded), read through [`FROM`].
pub const COLUMNS: &str = "d.decision_id, d.application_id, d.idempotency_key, d.received_at, \
    d.decided_at, d.model_id, d.model_version, d.model_sha256, d.plumbline_version, \
    d.request_sha256, d.outcome, d.probability, d.score, d.request, d.response, \
    f.action, f.reasons, f.note, f.decided_by, f.decided_at, f.idempotency_key, f.body_sha256";

/// Decisions with their final actions, if any.
pub const FROM: &str = "decisions d LEFT JOIN final_actions f ON f.decision_id = d.decision_id";

pub const INSERT_FINAL: &str = "INSERT INTO final_actions (decision_id, action, reasons, note, \
    decided_by, decided_at, idempotency_key, body_sha256) \
    VALUES ($1, $2, $3, $4, $5, $6, $7, $8) ON CONFLICT (decision_id) DO NOTHING";

pub const INSERT: &str = "INSERT INTO decisions (decision_id, application_id, idempotency_key, \
    received_at, decided_at, model_id, model_version, model_sha256, plumbline_version, \
    request_sha256, outcome, probability, score, request, response) \
    VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15) \
    ON CONFLICT (idempotency_key) DO NOTHING";

/// The columns by which one record is looked up (both unique).
#[derive(Debug, Clone, Copy)]
pub enum Key {
    DecisionId,
    IdempotencyKey,
}

/// SELECT of the one record whose `key` column equals `$1`.
pub fn select_one(key: Key) -> String {
    let column = match key {
        Key::DecisionId => "decision_id",
        Key::IdempotencyKey => "idempotency_key",
    };
    format!("SELECT {COLUMNS} FROM {FROM} WHERE d.{column} = $1")
}

/// `$n` -> `?n`: SQLite's numbered parameters.
pub fn for_sqlite(sql: &str) -> String {
    sql.replace('$', "?")
}

/// The WHERE clause and its text parameters for `query` (only the filters present).
pub fn filter(query: &super::Query) -> (String, Vec<String>) {
    let mut clauses = Vec::new();
    let mut params: Vec<String> = Vec::new();
    let mut push = |clause: &str, values: &[&String]| {
        let mut c = clause.to_string();
        for v in values {
            params.push((*v).clone());
            c = c.replacen('#', &format!("${}", params.len()), 1);
        }
        clauses.push(c);
    };
    if let Some(v) = &query.application_id {
        push("d.application_id = #", &[v]);
    }
    if let Some(v) = &query.from {
        push("d.decided_at >= #", &[v]);
    }
    if let Some(v) = &query.to {
        push("d.decided_at < #", &[v]);
    }
    if let Some(v) = &query.outcome {
        push("d.outcome = #", &[v]);
    }
    if let Some(v) = &query.model_id {
        push("d.model_id = #", &[v]);
    }
    if let Some(v) = &query.model_version {
        push("d.model_version = #", &[v]);
    }
    match &query.final_action {
        None => {}
        Some(super::FinalFilter::Pending) => {
            push("d.outcome = 'refer' AND f.decision_id IS NULL", &[]);
        }
        Some(super::FinalFilter::Recorded) => push("f.decision_id IS NOT NULL", &[]),
        Some(super::FinalFilter::Action(a)) => push("f.action = #", &[a]),
    }
    if let Some(c) = &query.after {
        push(
            "(d.decided_at > # OR (d.decided_at = # AND d.decision_id > #))",
            &[&c.decided_at, &c.decided_at, &c.decision_id],
        );
    }
    let sql = if clauses.is_empty() {
        String::new()
    } else {
        format!(" WHERE {}", clauses.join(" AND "))
    };
    (sql, params)
}

/// SELECT of matching records in page order; `limit` rows at most when given.
pub fn select(query: &super::Query, limit: Option<usize>) -> (String, Vec<String>) {
    let (filter, params) = filter(query);
    let limit = limit.map(|n| format!(" LIMIT {n}")).unwrap_or_default();
    (
        format!("SELECT {COLUMNS} FROM {FROM}{filter} ORDER BY d.decided_at, d.decision_id{limit}"),
        params,
    )
}

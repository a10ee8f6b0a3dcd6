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
        sqlite: None,
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
        sqlite: None,
    },
    Migration {
        version: 3,
        about: "idempotency keys scoped to the requesting key; access log",
        // A key is unique per caller (a 409 never shows another caller's decision); old records
        // keep their keys under no caller. Every look-up, search, export and report over the
        // records is written to `record_access`, never updated.
        sql: "ALTER TABLE decisions ADD COLUMN requested_by TEXT COLLATE \"C\" NOT NULL DEFAULT '';
    ALTER TABLE decisions DROP CONSTRAINT decisions_idempotency_key_key;
    CREATE UNIQUE INDEX decisions_by_key ON decisions (requested_by, idempotency_key);
    CREATE TABLE record_access (
        access_id TEXT COLLATE \"C\" PRIMARY KEY,
        at TEXT COLLATE \"C\" NOT NULL,
        caller TEXT COLLATE \"C\" NOT NULL,
        role TEXT NOT NULL,
        action TEXT COLLATE \"C\" NOT NULL,
        target TEXT NOT NULL,
        records BIGINT,
        request_id TEXT NOT NULL
    );
    CREATE INDEX record_access_by_time ON record_access (at, access_id);",
        // SQLite cannot drop a column's UNIQUE: the table is rebuilt, rows copied as they are.
        sqlite: Some(
            "CREATE TABLE decisions_v3 (
        decision_id TEXT PRIMARY KEY,
        application_id TEXT NOT NULL,
        idempotency_key TEXT,
        received_at TEXT NOT NULL,
        decided_at TEXT NOT NULL,
        model_id TEXT NOT NULL,
        model_version TEXT NOT NULL,
        model_sha256 TEXT NOT NULL,
        plumbline_version TEXT NOT NULL,
        request_sha256 TEXT NOT NULL,
        outcome TEXT NOT NULL,
        probability DOUBLE PRECISION NOT NULL,
        score BIGINT NOT NULL,
        request TEXT NOT NULL,
        response TEXT NOT NULL,
        requested_by TEXT NOT NULL DEFAULT ''
    );
    INSERT INTO decisions_v3 SELECT decision_id, application_id, idempotency_key, received_at,
        decided_at, model_id, model_version, model_sha256, plumbline_version, request_sha256,
        outcome, probability, score, request, response, '' FROM decisions;
    DROP TABLE decisions;
    ALTER TABLE decisions_v3 RENAME TO decisions;
    CREATE INDEX decisions_by_time ON decisions (decided_at, decision_id);
    CREATE INDEX decisions_by_application ON decisions (application_id, decided_at, decision_id);
    CREATE UNIQUE INDEX decisions_by_key ON decisions (requested_by, idempotency_key);
    CREATE TABLE record_access (
        access_id TEXT PRIMARY KEY,
        at TEXT NOT NULL,
        caller TEXT NOT NULL,
        role TEXT NOT NULL,
        action TEXT NOT NULL,
        target TEXT NOT NULL,
        records BIGINT,
        request_id TEXT NOT NULL
    );
    CREATE INDEX record_access_by_time ON record_access (at, access_id);",
        ),
    },
    Migration {
        version: 4,
        about: "observed outcomes of applications",
        // One per application, never updated: a later row that disagrees is refused as a
        // conflict, so a back-test always reads what was first loaded.
        sql: "CREATE TABLE outcomes (
        application_id TEXT COLLATE \"C\" PRIMARY KEY,
        defaulted BIGINT NOT NULL CHECK (defaulted IN (0, 1)),
        observed_at TEXT COLLATE \"C\" NOT NULL,
        loaded_at TEXT COLLATE \"C\" NOT NULL,
        loaded_by TEXT NOT NULL
    );",
        sqlite: None,
    },
];

pub struct Migration {
    pub version: i64,
    pub about: &'static str,
    /// PostgreSQL's text (and SQLite's, with `COLLATE "C"` dropped, unless `sqlite` is given).
    pub sql: &'static str,
    /// SQLite's own text where its dialect differs.
    pub sqlite: Option<&'static str>,
}

impl Migration {
    /// The text SQLite runs.
    pub fn for_sqlite(&self) -> String {
        self.sqlite
            .map_or_else(|| self.sql.replace(" COLLATE \"C\"", ""), str::to_string)
    }
}

/// The bookkeeping table, created before any migration runs.
pub const MIGRATIONS_TABLE: &str = "CREATE TABLE IF NOT EXISTS plumbline_migrations (
    version BIGINT PRIMARY KEY, about TEXT NOT NULL, applied_at TEXT NOT NULL)";

/// Every column of a record, in [`super::Record`] field order, then its final action's (all
/// NULL when none is recorded), read through [`FROM`].
pub const COLUMNS: &str = "d.decision_id, d.application_id, d.idempotency_key, d.received_at, \
    d.decided_at, d.model_id, d.model_version, d.model_sha256, d.plumbline_version, \
    d.request_sha256, d.outcome, d.probability, d.score, d.request, d.response, d.requested_by, \
    f.action, f.reasons, f.note, f.decided_by, f.decided_at, f.idempotency_key, f.body_sha256";

/// Decisions with their final actions, if any.
pub const FROM: &str = "decisions d LEFT JOIN final_actions f ON f.decision_id = d.decision_id";

pub const INSERT_FINAL: &str = "INSERT INTO final_actions (decision_id, action, reasons, note, \
    decided_by, decided_at, idempotency_key, body_sha256) \
    VALUES ($1, $2, $3, $4, $5, $6, $7, $8) ON CONFLICT (decision_id) DO NOTHING";

pub const INSERT: &str = "INSERT INTO decisions (decision_id, application_id, idempotency_key, \
    received_at, decided_at, model_id, model_version, model_sha256, plumbline_version, \
    request_sha256, outcome, probability, score, request, response, requested_by) \
    VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16) \
    ON CONFLICT (requested_by, idempotency_key) DO NOTHING";

pub const INSERT_ACCESS: &str = "INSERT INTO record_access (access_id, at, caller, role, action, \
    target, records, request_id) VALUES ($1, $2, $3, $4, $5, $6, $7, $8)";

/// The access log from `$1` (inclusive) to `$2` (exclusive), after the cursor (`$3`, `$4`),
/// oldest first.
pub const SELECT_ACCESS: &str = "SELECT access_id, at, caller, role, action, target, records, \
    request_id FROM record_access WHERE at >= $1 AND at < $2 AND (at > $3 OR (at = $3 AND \
    access_id > $4)) ORDER BY at, access_id LIMIT $5";

/// The columns by which one record is looked up (both unique).
#[derive(Debug, Clone, Copy)]
pub enum Key {
    DecisionId,
    IdempotencyKey,
}

/// SELECT of the one record whose `key` equals `$1` (and, for an idempotency key, whose
/// requester is `$2`).
pub fn select_one(key: Key) -> String {
    match key {
        Key::DecisionId => format!("SELECT {COLUMNS} FROM {FROM} WHERE d.decision_id = $1"),
        Key::IdempotencyKey => format!(
            "SELECT {COLUMNS} FROM {FROM} WHERE d.idempotency_key = $1 AND d.requested_by = $2"
        ),
    }
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
    if let Some(v) = query.outcome {
        push("d.outcome = #", &[&v.name().to_string()]);
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
        Some(super::FinalFilter::Action(a)) => push("f.action = #", &[&a.name().to_string()]),
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

/// One outcome (`$1` application, `$2` defaulted 0/1, `$3` observed, `$4` loaded, `$5` by),
/// written only when a decision of the application is recorded and it has no outcome yet.
pub const INSERT_OUTCOME: &str = "INSERT INTO outcomes (application_id, defaulted, observed_at, \
    loaded_at, loaded_by) SELECT CAST($1 AS TEXT), CAST($2 AS BIGINT), CAST($3 AS TEXT), \
    CAST($4 AS TEXT), CAST($5 AS TEXT) WHERE EXISTS (SELECT 1 FROM decisions \
    WHERE application_id = CAST($1 AS TEXT)) ON CONFLICT (application_id) DO NOTHING";

/// PostgreSQL: a group of outcomes from arrays (`$1` applications, `$2` defaulted, `$3`
/// observed, `$4` loaded, `$5` by; each application once), as [`INSERT_OUTCOME`] writes one,
/// answering the applications written.
pub const INSERT_OUTCOMES_PG: &str = "INSERT INTO outcomes (application_id, defaulted, \
    observed_at, loaded_at, loaded_by) SELECT u.a, u.d, u.o, u.l, u.b FROM unnest($1::text[], \
    $2::bigint[], $3::text[], $4::text[], $5::text[]) AS u(a, d, o, l, b) WHERE EXISTS (SELECT 1 \
    FROM decisions WHERE application_id = u.a) ON CONFLICT (application_id) DO NOTHING \
    RETURNING application_id";

/// PostgreSQL: the stored outcomes of the applications in `$1`.
pub const SELECT_OUTCOMES_PG: &str = "SELECT application_id, defaulted, observed_at FROM \
    outcomes WHERE application_id = ANY($1::text[])";

/// The stored outcome of application `$1`.
pub const SELECT_OUTCOME: &str =
    "SELECT defaulted, observed_at FROM outcomes WHERE application_id = $1";

/// Decisions of `query`'s model and range, each its application's latest under that model
/// (decided later anywhere supersedes it), with the final action and the observed outcome.
/// Columns as [`super::DecisionWithOutcome`]'s fields.
pub fn select_with_outcomes(query: &super::Query) -> (String, Vec<String>) {
    let (filter, params) = filter(query);
    let later = "NOT EXISTS (SELECT 1 FROM decisions l WHERE l.application_id = d.application_id \
        AND l.model_id = d.model_id AND (l.decided_at > d.decided_at OR (l.decided_at = \
        d.decided_at AND l.decision_id > d.decision_id)))";
    let filter = if filter.is_empty() {
        format!(" WHERE {later}")
    } else {
        format!("{filter} AND {later}")
    };
    (
        format!(
            "SELECT d.decision_id, d.decided_at, d.model_version, d.outcome, d.probability, \
             d.score, f.action, o.defaulted, o.observed_at FROM {FROM} LEFT JOIN outcomes o ON \
             o.application_id = d.application_id{filter} ORDER BY d.decided_at, d.decision_id"
        ),
        params,
    )
}

//! Fresh stores for tests: a SQLite file in a temporary folder, or a new PostgreSQL database on
//! the machine's server (127.0.0.1:5432, trust auth; override with PLUMBLINE_TEST_POSTGRES).
//! Without a server the PostgreSQL tests print why and skip, unless PLUMBLINE_REQUIRE_POSTGRES
//! is set (as `.ci/run` does), when they fail.

use std::sync::atomic::{AtomicU64, Ordering};

static SEQ: AtomicU64 = AtomicU64::new(0);

fn unique(prefix: &str) -> String {
    format!(
        "{prefix}_{}_{}",
        std::process::id(),
        SEQ.fetch_add(1, Ordering::Relaxed)
    )
}

/// A temporary folder removed on drop.
pub struct TempDir(pub std::path::PathBuf);

impl TempDir {
    pub fn new() -> Self {
        let p = std::env::temp_dir().join(unique("plumbline-test"));
        std::fs::create_dir_all(&p).unwrap();
        TempDir(p)
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// `sqlite:` location of a new store file, and the folder holding it.
pub fn sqlite() -> (String, TempDir) {
    let dir = TempDir::new();
    (
        format!("sqlite:{}", dir.0.join("records.sqlite3").display()),
        dir,
    )
}

fn server_url() -> String {
    std::env::var("PLUMBLINE_TEST_POSTGRES")
        .unwrap_or_else(|_| "postgres://postgres@127.0.0.1:5432/postgres".into())
}

/// A new, empty database dropped on drop.
pub struct TempDatabase {
    pub url: String,
    name: String,
}

impl Drop for TempDatabase {
    fn drop(&mut self) {
        if let Ok(mut c) = postgres::Client::connect(&server_url(), postgres::NoTls) {
            let _ = c.batch_execute(&format!(
                "DROP DATABASE IF EXISTS {} WITH (FORCE)",
                self.name
            ));
        }
    }
}

/// A fresh database, or `None` (with the reason printed) when no server answers and none is
/// required.
pub fn postgres() -> Option<TempDatabase> {
    let base = server_url();
    match postgres::Client::connect(&base, postgres::NoTls) {
        Ok(mut c) => {
            let name = unique("plumbline_test");
            c.batch_execute(&format!("CREATE DATABASE {name}")).unwrap();
            let (prefix, _) = base.rsplit_once('/').unwrap();
            Some(TempDatabase {
                url: format!("{prefix}/{name}"),
                name,
            })
        }
        Err(e) => {
            if std::env::var_os("PLUMBLINE_REQUIRE_POSTGRES").is_some() {
                panic!("PostgreSQL is required here (PLUMBLINE_REQUIRE_POSTGRES) but {base} fails: {e}");
            }
            eprintln!(
                "skipping: no PostgreSQL at {base} ({e}); set PLUMBLINE_TEST_POSTGRES to test it"
            );
            None
        }
    }
}

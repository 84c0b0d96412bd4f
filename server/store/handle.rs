//! The handle on the database ([`Store`]): which backend, the settings it waits by, the clock
//! writes are recorded at, and opening it (pools, each connection's settings, migrations).

use std::sync::{Arc, RwLock};
use std::time::Duration;

use sqlx::AnyPool;
use sqlx::any::{AnyConnectOptions, AnyPoolOptions};

use crate::domain::Timestamp;

use super::db::Health;
use super::usage::Usage;
use super::{StoreError, StoreResult};

/// Which database the store talks to.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Backend {
    Sqlite,
    Postgres,
}

impl Backend {
    pub fn name(self) -> &'static str {
        match self {
            Backend::Sqlite => "SQLite",
            Backend::Postgres => "PostgreSQL",
        }
    }
}

static SQLITE_MIGRATIONS: sqlx::migrate::Migrator = sqlx::migrate!("migrations/sqlite");
static POSTGRES_MIGRATIONS: sqlx::migrate::Migrator = sqlx::migrate!("migrations/postgres");

/// How long the store waits on the database.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct StoreSettings {
    /// The longest a request waits for the database: for a connection, for a lock another
    /// writer holds (SQLite's busy timeout), and for one statement (PostgreSQL's
    /// `statement_timeout`). Past it the request answers 503 with Retry-After.
    pub timeout: Duration,
}

impl Default for StoreSettings {
    fn default() -> Self {
        StoreSettings {
            timeout: Duration::from_secs(5),
        }
    }
}

/// Extra time a statement gets on the client side beyond the timeout, so that PostgreSQL's
/// own statement timeout (which names the cause) fires first whenever the server is alive.
pub(super) const CLIENT_MARGIN: Duration = Duration::from_secs(1);

/// A handle on the database. Cheap to clone; the app keeps no other state that matters.
///
/// On SQLite, reads and writes use separate pools: readers (many connections, which refuse
/// to write) never wait behind writers, and writers share one connection, so they queue in
/// the pool, in order, rather than in SQLite's busy handler. On PostgreSQL both are one pool.
#[derive(Clone, Debug)]
pub struct Store {
    pub(super) reader: AnyPool,
    pub(super) writer: AnyPool,
    pub(super) backend: Backend,
    pub(super) settings: StoreSettings,
    pub(super) health: Arc<Health>,
    /// Uses of tokens and sessions waiting to be written (see [`super::usage`]).
    pub(super) usage: Arc<Usage>,
    /// The full check this instance is running, if any (see [`super::checkpoint`]).
    pub(super) full_check: Arc<std::sync::Mutex<Option<i64>>>,
    /// Recorded writes committed through this handle (see [`Store::writes_committed`]).
    pub(super) writes: Arc<std::sync::atomic::AtomicU64>,
    /// When set, the time writes are recorded at (the demo seeds an invented past; tests
    /// step through time). Shared by every clone of this handle.
    pub(super) clock: Arc<RwLock<Option<Timestamp>>>,
}

/// Adds `mode=rwc` to a SQLite URL so the file is created when missing.
fn sqlite_url_with_create(url: &str) -> String {
    if url.contains("mode=") || url.contains(":memory:") {
        url.to_string()
    } else if url.contains('?') {
        format!("{url}&mode=rwc")
    } else {
        format!("{url}?mode=rwc")
    }
}

impl Store {
    /// Opens the database named by `url` (`sqlite://FILE` or `postgres://...`). Does not run
    /// migrations; see [`Store::migrate`].
    pub async fn connect(url: &str) -> StoreResult<Store> {
        Store::connect_with(url, StoreSettings::default()).await
    }

    /// [`Store::connect`] with chosen settings.
    pub async fn connect_with(url: &str, settings: StoreSettings) -> StoreResult<Store> {
        sqlx::any::install_default_drivers();
        let (backend, url) = if url.starts_with("sqlite:") {
            (Backend::Sqlite, sqlite_url_with_create(url))
        } else if url.starts_with("postgres://") || url.starts_with("postgresql://") {
            (Backend::Postgres, url.to_string())
        } else {
            return Err(StoreError::Config(format!(
                "unsupported database URL {url:?}: use sqlite://FILE or postgres://USER@HOST/DB"
            )));
        };
        let options: AnyConnectOptions = url
            .parse()
            .map_err(|e| StoreError::Config(format!("bad database URL: {e}")))?;
        let in_memory = url.contains(":memory:");
        let wait = settings.timeout;
        let health = Arc::new(Health::new(options.clone(), backend == Backend::Postgres));
        let pool = |max: u32, read_only: bool| {
            let health = health.clone();
            AnyPoolOptions::new()
                .after_release(move |_, _| {
                    let reuse = health.may_reuse();
                    Box::pin(async move { Ok(reuse) })
                })
                // `acquire` below applies the timeout; this one only backs it up.
                .acquire_timeout(wait + CLIENT_MARGIN)
                .max_connections(max)
                .after_connect(move |conn, _| {
                    Box::pin(async move { session_settings(conn, backend, wait, read_only).await })
                })
        };
        let open = |max: u32, read_only: bool| {
            let options = options.clone();
            async move {
                pool(max, read_only)
                    .connect_with(options)
                    .await
                    .map_err(|e| StoreError::Config(format!("cannot open {}: {e}", backend.name())))
            }
        };
        let (reader, writer) = match backend {
            Backend::Sqlite if !in_memory => {
                let writer = open(1, false).await?;
                // WAL lets readers carry on while one writer writes; it is a property of
                // the file, so setting it once covers every later connection.
                sqlx::query("PRAGMA journal_mode = WAL")
                    .execute(&writer)
                    .await?;
                (open(8, true).await?, writer)
            }
            // One in-memory database per connection: a single connection serves everything.
            Backend::Sqlite => {
                let one = open(1, false).await?;
                (one.clone(), one)
            }
            Backend::Postgres => {
                let both = open(10, false).await?;
                (both.clone(), both)
            }
        };
        Ok(Store {
            reader,
            writer,
            backend,
            settings,
            health,
            usage: Arc::default(),
            full_check: Arc::default(),
            writes: Arc::default(),
            clock: Arc::default(),
        })
    }

    /// Opens and migrates: what `serve` and the tests use.
    pub async fn open(url: &str) -> StoreResult<Store> {
        Store::open_with(url, StoreSettings::default()).await
    }

    /// [`Store::open`] with chosen settings.
    pub async fn open_with(url: &str, settings: StoreSettings) -> StoreResult<Store> {
        let store = Store::connect_with(url, settings).await?;
        store.migrate().await?;
        Ok(store)
    }

    /// Opens without migrating, for a role that may not change the schema; refuses a database
    /// whose migrations are not all applied.
    pub async fn open_migrated(url: &str, settings: StoreSettings) -> StoreResult<Store> {
        let store = Store::connect_with(url, settings).await?;
        let migrator = store.migrator();
        let latest = migrator.iter().map(|m| m.version).max().unwrap_or(0);
        let applied: Option<i64> = sqlx::query_scalar(
            "SELECT MAX(version) FROM _sqlx_migrations WHERE success = TRUE",
        )
        .fetch_one(&store.reader)
        .await
        .map_err(|e| {
            StoreError::Config(format!(
                "cannot read the migrations table ({e}); run `cutpoints migrate` as the database owner"
            ))
        })?;
        if applied.unwrap_or(0) < latest {
            return Err(StoreError::Config(format!(
                "the database schema is at migration {} but this cutpoints needs {latest}; run `cutpoints migrate` as the database owner",
                applied.unwrap_or(0)
            )));
        }
        Ok(store)
    }

    fn migrator(&self) -> &'static sqlx::migrate::Migrator {
        match self.backend {
            Backend::Sqlite => &SQLITE_MIGRATIONS,
            Backend::Postgres => &POSTGRES_MIGRATIONS,
        }
    }

    /// Applies pending migrations on one dedicated connection (a failed migration must not
    /// leave an advisory lock behind on a pooled connection).
    pub async fn migrate(&self) -> StoreResult<()> {
        let migrator = self.migrator();
        let mut conn = self.writer.acquire().await?;
        if self.backend == Backend::Postgres {
            // A migration may rewrite a large table: no statement timeout for it.
            sqlx::query("SET statement_timeout = 0")
                .execute(&mut *conn)
                .await?;
        }
        let result = migrator.run(&mut *conn).await;
        if result.is_err() {
            conn.detach();
            result?;
        } else if self.backend == Backend::Postgres {
            conn.close_on_drop();
        }
        Ok(())
    }

    /// Records the following writes at `at` instead of the system time (`None`: back to the
    /// system clock). Event times still never run backwards.
    pub fn set_clock(&self, at: Option<Timestamp>) {
        *self
            .clock
            .write()
            .expect("the clock lock is never poisoned") = at;
    }

    /// The time a write made now is recorded at.
    pub fn now(&self) -> Timestamp {
        self.clock
            .read()
            .expect("the clock lock is never poisoned")
            .unwrap_or_else(Timestamp::now)
    }

    pub fn backend(&self) -> Backend {
        self.backend
    }

    /// The settings the store was opened with.
    pub fn settings(&self) -> StoreSettings {
        self.settings
    }

    /// The pool writes go through (for tests and tools that need the database itself, such
    /// as creating a database on a PostgreSQL server).
    pub fn pool(&self) -> &AnyPool {
        &self.writer
    }

    /// Closes every connection; later requests answer 503.
    pub async fn close(&self) {
        self.reader.close().await;
        self.writer.close().await;
    }

    /// True when the database holds anything beyond its schema (used by `demo`).
    pub async fn holds_data(&self) -> StoreResult<bool> {
        let mut db = self.read().await?;
        let users: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM users")
            .fetch_one(&mut db)
            .await?;
        let events: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM events")
            .fetch_one(&mut db)
            .await?;
        Ok(users + events > 0)
    }
}

/// Settings each new connection gets: on SQLite, how long to wait for another writer's lock
/// and, for readers, a refusal to write; on PostgreSQL, the statement timeout.
async fn session_settings(
    conn: &mut sqlx::AnyConnection,
    backend: Backend,
    wait: Duration,
    read_only: bool,
) -> Result<(), sqlx::Error> {
    use sqlx::Executor;
    let ms = wait.as_millis();
    match backend {
        Backend::Sqlite => {
            conn.execute(sqlx::AssertSqlSafe(format!("PRAGMA busy_timeout = {ms}")))
                .await?;
            if read_only {
                conn.execute("PRAGMA query_only = ON").await?;
            }
        }
        Backend::Postgres => {
            conn.execute(sqlx::AssertSqlSafe(format!("SET statement_timeout = {ms}")))
                .await?;
        }
    }
    Ok(())
}

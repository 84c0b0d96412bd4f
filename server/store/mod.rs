//! All SQL, for both backends.
//!
//! One query layer serves SQLite and PostgreSQL through sqlx's `Any` driver with portable SQL;
//! each backend has its own migrations folder (docs/architecture.md says why). Every write that
//! changes state goes through a [`WriteTx`], which serialises writers and appends the change's
//! event to the event record inside the same transaction.

pub mod audited;
mod codecs;
mod db;
pub mod events;
pub mod metrics;
pub mod observations;
pub mod policy;
pub mod proposals;
pub mod sessions;
pub mod throttle;
pub mod tokens;
pub mod usage;
pub mod users;
pub mod versions;

use std::sync::{Arc, RwLock};
use std::time::Duration;

use sqlx::any::{AnyConnectOptions, AnyPoolOptions};
use sqlx::pool::PoolConnection;
use sqlx::{Any, AnyPool};

use crate::domain::Problems;
use crate::domain::Timestamp;

pub use db::Db;
use db::Health;
pub use events::Actor;

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

/// The store layer's one error type; the web layer maps each variant to a status in one place.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("{0}")]
    NotFound(String),
    #[error("{0}")]
    Conflict(String),
    #[error("{}", .0.first_message())]
    Invalid(Problems),
    /// The database is there but could not take this in time: another writer held the lock
    /// (SQLite's busy timeout, PostgreSQL's statement timeout) or every connection was in use.
    #[error("the database is busy: {0}")]
    Busy(String),
    /// The database is not answering: down, restarting, stalled or unreachable.
    #[error("the database is unavailable: {0}")]
    Unavailable(sqlx::Error),
    #[error("database error: {0}")]
    Database(sqlx::Error),
    #[error("{0}")]
    Config(String),
}

impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        if db::means_gone(&e) || matches!(e, sqlx::Error::PoolTimedOut) {
            return StoreError::Unavailable(e);
        }
        match e {
            sqlx::Error::Database(ref d) if d.is_unique_violation() => {
                StoreError::Conflict("that already exists".to_string())
            }
            sqlx::Error::Database(ref d) if is_busy(d.code().as_deref()) => {
                StoreError::Busy(d.message().to_string())
            }
            // A backstop behind the text rules of `domain::text`: PostgreSQL refuses a NUL or
            // bytes that are not UTF-8 in text (SQLSTATE 22021); that is bad input, not a fault.
            sqlx::Error::Database(ref d) if d.code().as_deref() == Some("22021") => {
                StoreError::Invalid(Problems::single(
                    "text",
                    "text must not contain NUL or other control characters",
                ))
            }
            other => StoreError::Database(other),
        }
    }
}

/// True for a database error that means "not now": SQLite's SQLITE_BUSY (5) and
/// SQLITE_LOCKED (6) in their primary or extended forms; PostgreSQL's statement timeout or
/// cancellation (57014), a lock that was not available (55P03), and a serialisation failure
/// or deadlock (class 40), each of which a later attempt may pass.
fn is_busy(code: Option<&str>) -> bool {
    match code {
        Some(state) if db::is_sqlstate(state) => {
            state == "57014" || state == "55P03" || state.starts_with("40")
        }
        Some(code) => code.parse::<i64>().is_ok_and(|n| matches!(n & 0xff, 5 | 6)),
        None => false,
    }
}

impl StoreError {
    /// True when the same request may pass later: the database was busy or away.
    pub fn is_transient(&self) -> bool {
        matches!(self, StoreError::Busy(_) | StoreError::Unavailable(_))
    }
}

impl From<sqlx::migrate::MigrateError> for StoreError {
    fn from(e: sqlx::migrate::MigrateError) -> Self {
        StoreError::Config(format!("migration failed: {e}"))
    }
}

pub type StoreResult<T> = Result<T, StoreError>;

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
const CLIENT_MARGIN: Duration = Duration::from_secs(1);
/// After this long waiting for a pooled connection, the store asks the server directly
/// whether it answers, so that requests do not wait the whole timeout on a server that is
/// gone.
const PROBE_AFTER: Duration = Duration::from_millis(250);

/// A handle on the database. Cheap to clone; the app keeps no other state that matters.
///
/// On SQLite, reads and writes use separate pools: readers (many connections, which refuse
/// to write) never wait behind writers, and writers share one connection, so they queue in
/// the pool, in order, rather than in SQLite's busy handler. On PostgreSQL both are one pool.
#[derive(Clone, Debug)]
pub struct Store {
    reader: AnyPool,
    writer: AnyPool,
    backend: Backend,
    settings: StoreSettings,
    health: Arc<Health>,
    /// Uses of tokens and sessions waiting to be written (see [`usage`]).
    usage: Arc<usage::Usage>,
    /// When set, the time writes are recorded at (the demo seeds an invented past; tests
    /// step through time). Shared by every clone of this handle.
    clock: Arc<RwLock<Option<Timestamp>>>,
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
        let pool = |max: u32, read_only: bool| {
            AnyPoolOptions::new()
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
            health: Arc::new(Health::new(options, backend == Backend::Postgres)),
            usage: Arc::default(),
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

    /// A connection for reading. On SQLite it refuses to write, so a read can never wait
    /// for, or hold, the write lock.
    pub async fn read(&self) -> StoreResult<Db> {
        let conn = self.acquire(&self.reader).await?;
        Ok(Db::pooled(
            conn,
            self.statement_limit(),
            self.health.clone(),
        ))
    }

    /// A read-only transaction that sees one snapshot of the database throughout, for checks
    /// that read several tables and must not see writes made meanwhile.
    pub async fn begin_snapshot(&self) -> StoreResult<Db> {
        let conn = self.acquire(&self.reader).await?;
        let begin = match self.backend {
            // Deferred: the snapshot is taken at the first read and kept to the end (WAL).
            Backend::Sqlite => "BEGIN",
            Backend::Postgres => "BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY",
        };
        Ok(Db::begin(
            conn,
            Some(begin),
            self.statement_limit(),
            self.health.clone(),
        )
        .await?)
    }

    /// A connection for a write that the event record does not cover (sessions, sign-in
    /// counters, staging rows): each statement commits on its own.
    pub async fn unrecorded_write(&self) -> StoreResult<Db> {
        let conn = self.acquire(&self.writer).await?;
        Ok(Db::pooled(
            conn,
            self.statement_limit(),
            self.health.clone(),
        ))
    }

    /// A short transaction for writes that the event record does not cover, holding the
    /// write lock (on SQLite) for its length only.
    pub async fn begin_unrecorded(&self) -> StoreResult<Db> {
        let conn = self.acquire(&self.writer).await?;
        let begin = match self.backend {
            Backend::Sqlite => Some("BEGIN IMMEDIATE"),
            Backend::Postgres => None,
        };
        Ok(Db::begin(conn, begin, self.statement_limit(), self.health.clone()).await?)
    }

    /// How long a statement may go without an answer before the store gives up on it: on
    /// PostgreSQL the timeout and a margin (its own statement timeout runs from a little
    /// later); SQLite needs none beyond its busy timeout.
    fn statement_limit(&self) -> Option<Duration> {
        match self.backend {
            Backend::Sqlite => None,
            Backend::Postgres => Some(self.settings.timeout + CLIENT_MARGIN),
        }
    }

    /// A pooled connection within the timeout: 503 `Busy` when every connection stayed in
    /// use, `Unavailable` at once when the server does not answer a direct check.
    async fn acquire(&self, pool: &AnyPool) -> StoreResult<PoolConnection<Any>> {
        let gone = || StoreError::Unavailable(sqlx::Error::PoolTimedOut);
        if self.health.is_down() && !self.health.probe().await {
            return Err(gone());
        }
        let acquire = pool.acquire();
        tokio::pin!(acquire);
        let first =
            tokio::time::timeout(PROBE_AFTER.min(self.settings.timeout), &mut acquire).await;
        let result = match first {
            Ok(result) => result,
            Err(_) => {
                if !self.health.probe().await {
                    return Err(gone());
                }
                let rest = self.settings.timeout.saturating_sub(PROBE_AFTER);
                tokio::time::timeout(rest, &mut acquire)
                    .await
                    .unwrap_or(Err(sqlx::Error::PoolTimedOut))
            }
        };
        match result {
            // The pool's own deadline (a little later) may come first on a loaded machine:
            // either way the wait ran out while the server answered the direct check, so
            // every connection stayed in use.
            Err(sqlx::Error::PoolTimedOut) => Err(StoreError::Busy(
                "every database connection stayed in use".into(),
            )),
            result => {
                self.health.note(&result);
                Ok(result?)
            }
        }
    }

    /// True when the database answers a trivial query (within about a second when it is
    /// known to be down).
    pub async fn is_healthy(&self) -> bool {
        let probe = async {
            let mut db = self.read().await?;
            let one: i64 = sqlx::query_scalar("SELECT 1").fetch_one(&mut db).await?;
            Ok::<_, StoreError>(one == 1)
        };
        matches!(
            tokio::time::timeout(Duration::from_secs(2), probe).await,
            Ok(Ok(true))
        )
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

    /// Starts a write: takes the write lock at once (BEGIN IMMEDIATE on SQLite, the chain-head
    /// row lock on PostgreSQL), so writers are serialised on both backends and a deciding
    /// transaction never fails half way for want of a lock.
    pub async fn begin_write(&self) -> StoreResult<WriteTx> {
        let mut tx = self.begin_unrecorded().await?;
        let head = events::lock_head(&mut tx).await?;
        // Event times never run backwards, even if the clock steps back.
        let now = std::cmp::max(self.now(), head.at);
        Ok(WriteTx {
            tx,
            head,
            now,
            appended: 0,
        })
    }
}

/// One state-changing transaction and the events it appends. Dropping it without
/// [`WriteTx::commit`] rolls everything back, events included.
pub struct WriteTx {
    tx: Db,
    head: events::ChainHead,
    now: Timestamp,
    appended: usize,
}

impl WriteTx {
    /// The time of this change, shared by its rows and its events.
    pub fn now(&self) -> Timestamp {
        self.now
    }

    pub fn conn(&mut self) -> &mut Db {
        &mut self.tx
    }

    /// Appends one event to the record; see [`events`].
    pub async fn record(
        &mut self,
        actor: &Actor,
        action: &str,
        subject: &str,
        payload: serde_json::Value,
    ) -> StoreResult<i64> {
        let seq = events::append(
            &mut self.tx,
            &mut self.head,
            self.now,
            actor,
            action,
            subject,
            payload,
        )
        .await?;
        self.appended += 1;
        Ok(seq)
    }

    pub async fn commit(mut self) -> StoreResult<()> {
        if self.appended > 0 {
            events::store_head(&mut self.tx, &self.head).await?;
        }
        self.tx.commit().await?;
        Ok(())
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

//! All SQL, for both backends.
//!
//! One query layer serves SQLite and PostgreSQL through sqlx's `Any` driver with portable SQL;
//! each backend has its own migrations folder (docs/architecture.md says why). Every write that
//! changes state goes through a [`WriteTx`], which serialises writers and appends the change's
//! event to the event record inside the same transaction.

pub mod events;
pub mod metrics;
pub mod observations;
pub mod policy;
pub mod proposals;
pub mod sessions;
pub mod throttle;
mod timestamp;
pub mod tokens;
pub mod users;
pub mod versions;

use std::sync::{Arc, RwLock};
use std::time::Duration;

use sqlx::any::{AnyConnectOptions, AnyPoolOptions};
use sqlx::{Any, AnyPool, Transaction};

use crate::domain::Timestamp;
use crate::domain::metric::Problems;

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
    #[error("the database is unavailable: {0}")]
    Unavailable(sqlx::Error),
    #[error("database error: {0}")]
    Database(sqlx::Error),
    #[error("{0}")]
    Config(String),
}

impl From<sqlx::Error> for StoreError {
    fn from(e: sqlx::Error) -> Self {
        match e {
            sqlx::Error::PoolTimedOut | sqlx::Error::PoolClosed | sqlx::Error::Io(_) => {
                StoreError::Unavailable(e)
            }
            sqlx::Error::Database(ref db) if db.is_unique_violation() => {
                StoreError::Conflict("that already exists".to_string())
            }
            other => StoreError::Database(other),
        }
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

/// A handle on the database. Cheap to clone; the app keeps no other state that matters.
#[derive(Clone, Debug)]
pub struct Store {
    pool: AnyPool,
    backend: Backend,
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
        let pool_options = AnyPoolOptions::new()
            .acquire_timeout(Duration::from_secs(10))
            .max_connections(match backend {
                Backend::Sqlite => 8,
                Backend::Postgres => 10,
            });
        let pool = pool_options
            .connect_with(options)
            .await
            .map_err(|e| StoreError::Config(format!("cannot open {}: {e}", backend.name())))?;
        if backend == Backend::Sqlite {
            // WAL lets readers carry on while one writer writes; it is a property of the file,
            // so setting it once here covers every later connection. sqlx already turns on
            // foreign keys and a 5 s busy timeout for each SQLite connection.
            sqlx::query("PRAGMA journal_mode = WAL")
                .execute(&pool)
                .await?;
        }
        Ok(Store {
            pool,
            backend,
            clock: Arc::default(),
        })
    }

    /// Opens and migrates: what `serve` and the tests use.
    pub async fn open(url: &str) -> StoreResult<Store> {
        let store = Store::connect(url).await?;
        store.migrate().await?;
        Ok(store)
    }

    /// Opens without migrating, for a role that may not change the schema; refuses a database
    /// whose migrations are not all applied.
    pub async fn open_migrated(url: &str) -> StoreResult<Store> {
        let store = Store::connect(url).await?;
        let migrator = store.migrator();
        let latest = migrator.iter().map(|m| m.version).max().unwrap_or(0);
        let applied: Option<i64> = sqlx::query_scalar(
            "SELECT MAX(version) FROM _sqlx_migrations WHERE success = TRUE",
        )
        .fetch_one(&store.pool)
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
        let mut conn = self.pool.acquire().await?;
        let result = migrator.run(&mut *conn).await;
        if result.is_err() {
            conn.detach();
        }
        result?;
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

    pub fn pool(&self) -> &AnyPool {
        &self.pool
    }

    /// True when the database answers a trivial query within two seconds.
    pub async fn is_healthy(&self) -> bool {
        let probe = sqlx::query_scalar::<_, i64>("SELECT 1").fetch_one(&self.pool);
        matches!(
            tokio::time::timeout(Duration::from_secs(2), probe).await,
            Ok(Ok(1))
        )
    }

    /// True when the database holds anything beyond its schema (used by `demo`).
    pub async fn holds_data(&self) -> StoreResult<bool> {
        let users: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM users")
            .fetch_one(&self.pool)
            .await?;
        let events: i64 = sqlx::query_scalar("SELECT COUNT(*) FROM events")
            .fetch_one(&self.pool)
            .await?;
        Ok(users + events > 0)
    }

    /// Starts a write: takes the write lock at once (BEGIN IMMEDIATE on SQLite, the chain-head
    /// row lock on PostgreSQL), so writers are serialised on both backends and a deciding
    /// transaction never fails half way for want of a lock.
    pub async fn begin_write(&self) -> StoreResult<WriteTx> {
        let mut tx = match self.backend {
            Backend::Sqlite => self.pool.begin_with("BEGIN IMMEDIATE").await?,
            Backend::Postgres => self.pool.begin().await?,
        };
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
    tx: Transaction<'static, Any>,
    head: events::ChainHead,
    now: Timestamp,
    appended: usize,
}

impl WriteTx {
    /// The time of this change, shared by its rows and its events.
    pub fn now(&self) -> Timestamp {
        self.now
    }

    pub fn conn(&mut self) -> &mut sqlx::AnyConnection {
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

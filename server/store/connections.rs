//! The connections a [`Store`] hands out, each acquired within the store's timeout: for
//! reading, for a read-only snapshot, and for writes the event record does not cover; and
//! whether the database answers at all.

use std::time::Duration;

use sqlx::pool::PoolConnection;
use sqlx::{Any, AnyPool};

use super::handle::CLIENT_MARGIN;
use super::{Backend, Db, Store, StoreError, StoreResult};

/// After this long waiting for a pooled connection, the store asks the server directly
/// whether it answers, so that requests do not wait the whole timeout on a server that is
/// gone.
const PROBE_AFTER: Duration = Duration::from_millis(250);

impl Store {
    /// A connection for reading. On SQLite it refuses to write, so a read can never wait
    /// for, or hold, the write lock.
    pub async fn read(&self) -> StoreResult<Db> {
        self.pooled(&self.reader).await
    }

    /// A read-only transaction that sees one snapshot of the database throughout, for checks
    /// that read several tables and must not see writes made meanwhile.
    pub async fn begin_snapshot(&self) -> StoreResult<Db> {
        let begin = match self.backend {
            // Deferred: the snapshot is taken at the first read and kept to the end (WAL).
            Backend::Sqlite => "BEGIN",
            Backend::Postgres => "BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY",
        };
        self.begin_on(&self.reader, Some(begin)).await
    }

    /// A connection for a write that the event record does not cover (sessions, sign-in
    /// counters, staging rows): each statement commits on its own.
    pub async fn unrecorded_write(&self) -> StoreResult<Db> {
        self.pooled(&self.writer).await
    }

    /// A short transaction for writes that the event record does not cover, holding the
    /// write lock (on SQLite) for its length only.
    pub async fn begin_unrecorded(&self) -> StoreResult<Db> {
        let begin = match self.backend {
            Backend::Sqlite => Some("BEGIN IMMEDIATE"),
            Backend::Postgres => None,
        };
        self.begin_on(&self.writer, begin).await
    }

    /// A connection of `pool` whose statements each commit on their own.
    async fn pooled(&self, pool: &AnyPool) -> StoreResult<Db> {
        let conn = self.acquire(pool).await?;
        Ok(Db::pooled(
            conn,
            self.statement_limit(),
            self.health.clone(),
        ))
    }

    /// A transaction on a connection of `pool`, begun with `statement` (`None`: the driver's
    /// plain `BEGIN`).
    async fn begin_on(&self, pool: &AnyPool, statement: Option<&'static str>) -> StoreResult<Db> {
        let conn = self.acquire(pool).await?;
        Ok(Db::begin(conn, statement, self.statement_limit(), self.health.clone()).await?)
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
}

//! Connections that never wait on the database for longer than its timeout, and what the
//! store knows about whether the database is answering at all.
//!
//! Every statement the store runs goes through a [`Db`]: a pooled connection or a
//! transaction. On PostgreSQL its statements fail with a time-out error when the server sends
//! nothing for the store's timeout and a second (so that the server's own statement timeout,
//! which says more, comes first when the server is alive): that is what keeps a stalled server
//! (its processes stopped) from holding a request for as long as it is stalled. SQLite is a
//! file in this process: its busy timeout bounds its waits, and nothing more is needed. Errors that mean the database has gone away mark it down;
//! while it is down, new requests are refused at once (see `Store::acquire`).

use std::pin::Pin;
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::task::{Context, Poll};
use std::time::{Duration, Instant};

use futures_core::Stream;
use futures_core::future::BoxFuture;
use futures_core::stream::BoxStream;
use sqlx::any::{AnyConnectOptions, AnyQueryResult, AnyRow, AnyStatement, AnyTypeInfo};
use sqlx::pool::PoolConnection;
use sqlx::{
    Any, AnyConnection, ConnectOptions, Connection, Either, Execute, Executor, Transaction,
};

/// Whether the database answered lately, shared by every clone of a store.
#[derive(Debug)]
pub(super) struct Health {
    down: AtomicBool,
    /// The last direct check: when, and whether the server answered.
    probe: tokio::sync::Mutex<Option<(Instant, bool)>>,
    options: AnyConnectOptions,
    /// SQLite is a file: there is no server to lose.
    has_server: bool,
    /// When a statement was last given up on while the server might still carry it out.
    last_abandoned: std::sync::Mutex<Option<Instant>>,
}

/// How long after a statement was given up on the pools close the connections handed back,
/// instead of lending them again.
const DISTRUST_AFTER_ABANDON: Duration = Duration::from_secs(10);

/// How long one direct check may take.
const PROBE_TIMEOUT: Duration = Duration::from_secs(1);
/// A check this recent is believed without asking again.
const PROBE_FRESH: Duration = Duration::from_millis(500);

impl Health {
    pub(super) fn new(options: AnyConnectOptions, has_server: bool) -> Health {
        Health {
            down: AtomicBool::new(false),
            probe: tokio::sync::Mutex::new(None),
            options,
            has_server,
            last_abandoned: std::sync::Mutex::new(None),
        }
    }

    /// A statement was given up on (see [`bounded`]).
    fn abandoned(&self) {
        *self.last_abandoned.lock().expect("never poisoned") = Some(Instant::now());
    }

    /// Whether a connection handed back now may be lent again: not while the server is
    /// believed down, nor shortly after a statement was given up on, since that connection may
    /// be in the middle of a transaction nobody will finish (the pool then opens a new one).
    pub(super) fn may_reuse(&self) -> bool {
        let recent = self
            .last_abandoned
            .lock()
            .expect("never poisoned")
            .is_some_and(|at| at.elapsed() < DISTRUST_AFTER_ABANDON);
        !self.is_down() && !recent
    }

    pub(super) fn is_down(&self) -> bool {
        self.down.load(Ordering::Relaxed)
    }

    fn set_down(&self, down: bool) {
        if self.down.load(Ordering::Relaxed) != down {
            self.down.store(down, Ordering::Relaxed);
            if down {
                tracing::error!(
                    "the database stopped answering; refusing requests until it is back"
                );
            } else {
                tracing::info!("the database is answering again");
            }
        }
    }

    /// Notes what a statement's result says about the database.
    pub(super) fn note<T>(&self, result: &Result<T, sqlx::Error>) {
        match result {
            Ok(_) => self.set_down(false),
            Err(e) if means_gone(e) => self.set_down(true),
            Err(_) => {}
        }
    }

    /// Asks the server directly, with a fresh connection outside the pool, whether it
    /// answers; one check at a time, and a recent answer is reused.
    pub(super) async fn probe(&self) -> bool {
        if !self.has_server {
            return true;
        }
        let mut last = self.probe.lock().await;
        if let Some((at, ok)) = *last
            && at.elapsed() < PROBE_FRESH
        {
            return ok;
        }
        let attempt = async {
            let mut conn: AnyConnection = self.options.connect().await?;
            sqlx::query("SELECT 1").execute(&mut conn).await?;
            conn.close().await
        };
        let ok = matches!(
            tokio::time::timeout(PROBE_TIMEOUT, attempt).await,
            Ok(Ok(()))
        );
        *last = Some((Instant::now(), ok));
        self.set_down(!ok);
        ok
    }
}

/// True for errors that say the database is not there (as opposed to refusing one statement):
/// a lost or refused connection, a server shutting down (SQLSTATE class 57, other than a
/// cancelled statement), a connection failure (class 08), a worker that died.
pub(super) fn means_gone(e: &sqlx::Error) -> bool {
    match e {
        sqlx::Error::Io(_)
        | sqlx::Error::Tls(_)
        | sqlx::Error::Protocol(_)
        | sqlx::Error::PoolClosed
        | sqlx::Error::WorkerCrashed => true,
        sqlx::Error::Database(db) => db.code().is_some_and(|code| {
            is_sqlstate(&code)
                && ((code.starts_with("57") && code != "57014") || code.starts_with("08"))
        }),
        _ => false,
    }
}

/// PostgreSQL reports five-character SQLSTATEs; SQLite's result codes are shorter numbers.
pub(super) fn is_sqlstate(code: &str) -> bool {
    code.len() == 5
}

/// The error a statement gets when the database sent nothing for too long.
fn timed_out() -> sqlx::Error {
    sqlx::Error::Io(std::io::Error::new(
        std::io::ErrorKind::TimedOut,
        "the database did not answer in time",
    ))
}

enum Conn {
    Pooled(PoolConnection<Any>),
    Tx(Transaction<'static, Any>),
}

/// A connection, or a transaction, whose every statement is bounded in time.
pub struct Db {
    conn: Conn,
    /// How long a statement may go without any answer (`None`: as long as the database's own
    /// timeouts allow).
    limit: Option<Duration>,
    health: Arc<Health>,
}

impl std::fmt::Debug for Db {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Db")
            .field("transaction", &matches!(self.conn, Conn::Tx(_)))
            .field("limit", &self.limit)
            .finish()
    }
}

impl Db {
    pub(super) fn pooled(
        conn: PoolConnection<Any>,
        limit: Option<Duration>,
        health: Arc<Health>,
    ) -> Db {
        Db {
            conn: Conn::Pooled(conn),
            limit,
            health,
        }
    }

    /// Begins a transaction on `conn` with `statement` (`BEGIN IMMEDIATE` on SQLite).
    pub(super) async fn begin(
        conn: PoolConnection<Any>,
        statement: Option<&'static str>,
        limit: Option<Duration>,
        health: Arc<Health>,
    ) -> Result<Db, sqlx::Error> {
        let begin = Transaction::begin(conn, statement.map(sqlx::SqlSafeStr::into_sql_str));
        let tx = bounded(limit, &health, begin).await?;
        Ok(Db {
            conn: Conn::Tx(tx),
            limit,
            health,
        })
    }

    /// Commits the transaction (a plain connection has nothing to commit).
    pub(super) async fn commit(self) -> Result<(), sqlx::Error> {
        match self.conn {
            Conn::Tx(tx) => bounded(self.limit, &self.health, tx.commit()).await,
            Conn::Pooled(_) => Ok(()),
        }
    }

    fn raw(&mut self) -> &mut AnyConnection {
        match &mut self.conn {
            Conn::Pooled(c) => c,
            Conn::Tx(t) => t,
        }
    }
}

/// Runs `work` for at most `limit`, noting what its result says about the database.
async fn bounded<T>(
    limit: Option<Duration>,
    health: &Health,
    work: impl Future<Output = Result<T, sqlx::Error>>,
) -> Result<T, sqlx::Error> {
    let result = match limit {
        Some(limit) => {
            let work = std::pin::pin!(work);
            match tokio::time::timeout(limit, work).await {
                Ok(result) => result,
                Err(_) => {
                    // Noted before the work is dropped: dropping it hands its connection back
                    // with a statement the server may still carry out (a BEGIN among them), so
                    // the pool must close that connection rather than lend it again.
                    health.abandoned();
                    Err(timed_out())
                }
            }
        }
        None => work.await,
    };
    health.note(&result);
    result
}

/// A result stream that ends with a time-out error when no item arrives within `limit`.
struct BoundedStream<'e, T> {
    inner: BoxStream<'e, Result<T, sqlx::Error>>,
    /// The limit and the timer of the next item.
    limit: Option<(Duration, Pin<Box<tokio::time::Sleep>>)>,
    health: Arc<Health>,
    ended: bool,
}

impl<T> Stream for BoundedStream<'_, T> {
    type Item = Result<T, sqlx::Error>;

    fn poll_next(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Option<Self::Item>> {
        if self.ended {
            return Poll::Ready(None);
        }
        match self.inner.as_mut().poll_next(cx) {
            Poll::Ready(item) => {
                match &item {
                    Some(result) => self.health.note(result),
                    None => self.ended = true,
                }
                if let Some((limit, timer)) = &mut self.limit {
                    let next = tokio::time::Instant::now() + *limit;
                    timer.as_mut().reset(next);
                }
                Poll::Ready(item)
            }
            Poll::Pending => {
                let Some((_, timer)) = &mut self.limit else {
                    return Poll::Pending;
                };
                match timer.as_mut().poll(cx) {
                    Poll::Ready(()) => {
                        self.ended = true;
                        self.health.abandoned();
                        self.health.note::<()>(&Err(timed_out()));
                        Poll::Ready(Some(Err(timed_out())))
                    }
                    Poll::Pending => Poll::Pending,
                }
            }
        }
    }
}

impl<'c> Executor<'c> for &'c mut Db {
    type Database = Any;

    fn fetch_many<'e, 'q: 'e, E>(
        self,
        query: E,
    ) -> BoxStream<'e, Result<Either<AnyQueryResult, AnyRow>, sqlx::Error>>
    where
        'c: 'e,
        E: 'q + Execute<'q, Any>,
    {
        let health = self.health.clone();
        let Some(limit) = self.limit else {
            let inner = self.raw().fetch_many(query);
            return Box::pin(BoundedStream {
                inner,
                limit: None,
                health,
                ended: false,
            });
        };
        let inner = self.raw().fetch_many(query);
        Box::pin(BoundedStream {
            inner,
            limit: Some((limit, Box::pin(tokio::time::sleep(limit)))),
            health,
            ended: false,
        })
    }

    fn fetch_optional<'e, 'q: 'e, E>(
        self,
        query: E,
    ) -> BoxFuture<'e, Result<Option<AnyRow>, sqlx::Error>>
    where
        'c: 'e,
        E: 'q + Execute<'q, Any>,
    {
        let limit = self.limit;
        let health = self.health.clone();
        let inner = self.raw().fetch_optional(query);
        Box::pin(async move { bounded(limit, &health, inner).await })
    }

    fn prepare_with<'e>(
        self,
        sql: sqlx::SqlStr,
        parameters: &'e [AnyTypeInfo],
    ) -> BoxFuture<'e, Result<AnyStatement, sqlx::Error>>
    where
        'c: 'e,
    {
        let limit = self.limit;
        let health = self.health.clone();
        let inner = self.raw().prepare_with(sql, parameters);
        Box::pin(async move { bounded(limit, &health, inner).await })
    }

    fn describe<'e>(
        self,
        sql: sqlx::SqlStr,
    ) -> BoxFuture<'e, Result<sqlx::Describe<Any>, sqlx::Error>>
    where
        'c: 'e,
    {
        self.raw().describe(sql)
    }
}

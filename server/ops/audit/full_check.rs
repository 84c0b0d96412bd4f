//! The two ways the event record is checked.
//!
//! - The quick check (every audit page and `GET /api/v1/audit/verify`) goes on from the
//!   checkpoint the last successful check left, so it reads only the events after it: its
//!   cost follows what changed, not the size of the record.
//! - The full check (`cutpoints audit verify`, and auditors' "check everything" button) reads
//!   every event and replays them all against the audited tables. Asked for from the web, it
//!   runs on a thread of its own, its progress kept in the database, and its finding stands
//!   beside every quick check until a later full check.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicI64, Ordering};
use std::time::Duration;

use serde::{Deserialize, Serialize};

use super::{Verification, conn, require_auditor};
use crate::domain::User;
use crate::ops::{OpError, OpResult};
use crate::store::Store;
use crate::store::audited::{self, Finding};
use crate::store::checkpoint::{self, FullCheck};
use crate::store::events;

/// How often a running full check writes how far it got.
const PROGRESS_EVERY: Duration = Duration::from_secs(1);

/// A full check as auditors see it: how far it got, and once finished what it found.
#[derive(Clone, Debug, PartialEq, Eq, Serialize, Deserialize, utoipa::ToSchema)]
pub struct FullCheckView {
    #[serde(flatten)]
    pub check: FullCheck,
    /// Whether everything held; absent while it runs.
    pub ok: Option<bool>,
    /// What `cutpoints audit verify` would print for it; absent while it runs.
    pub line: Option<String>,
}

impl FullCheckView {
    fn of(check: &FullCheck) -> FullCheckView {
        let found = finding(check);
        FullCheckView {
            check: check.clone(),
            ok: found.as_ref().map(|v| v.ok),
            line: found.map(|v| v.line),
        }
    }
}

/// What a finished full check found, as it was stored.
fn finding(check: &FullCheck) -> Option<Verification> {
    check
        .result
        .as_deref()
        .and_then(|json| serde_json::from_str(json).ok())
}

/// A full check asked for from the web: its id, and whether it was already running.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct FullCheckStarted {
    pub id: i64,
    pub already_running: bool,
}

/// The quick check (see the module's comment).
pub(super) async fn quick(store: &Store, known: Option<(i64, String)>) -> OpResult<Verification> {
    let (from, (finished, running)) = {
        let mut c = conn(store).await?;
        (
            checkpoint::read(&mut c).await?,
            checkpoint::latest_full(&mut c).await?,
        )
    };
    let found = audited::check_since(store, from.start(), known).await?;
    if let Finding::Ok { events, head } = &found
        && *events > from.seq
    {
        // Best effort and off the answer's path: a read never waits for the write lock.
        let (store, events, head, at) = (store.clone(), *events, head.clone(), store.now());
        tokio::spawn(async move {
            if let Err(e) = checkpoint::advance(&store, events, &head, at).await {
                tracing::debug!(error = %e, "the audit checkpoint stays where it was");
            }
        });
    }
    let mut v = Verification::from_finding(found);
    v.verified_before = from.seq;
    if let Some(full) = finished.as_ref().and_then(finding) {
        v = v.with_full_finding(&full);
    }
    v.last_full_check = finished.as_ref().map(FullCheckView::of);
    v.running_full_check = running.as_ref().map(FullCheckView::of);
    Ok(v)
}

/// Starts a full check in the background for an auditor; a check already running in this
/// instance is not started twice.
pub async fn start_full_check(store: &Store, by: &User) -> OpResult<FullCheckStarted> {
    require_auditor(by)?;
    if let Err(id) = store.claim_full_check() {
        return Ok(FullCheckStarted {
            id,
            already_running: true,
        });
    }
    let started = record_start(store, by.username.as_str()).await;
    let id = match started {
        Ok(id) => id,
        Err(e) => {
            store.set_full_check(None);
            return Err(e);
        }
    };
    store.set_full_check(Some(id));
    // A thread of its own, off the threads that serve requests: it hashes every event.
    let (handle, store) = (store.clone(), store.clone());
    let spawned = std::thread::Builder::new()
        .name("full-check".into())
        .spawn(move || {
            let runtime = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build();
            match runtime {
                Ok(runtime) => runtime.block_on(async {
                    if let Err(e) = run_recorded(&store, Some(id), None).await {
                        tracing::error!(error = %e, check = id, "the full check could not finish");
                    }
                }),
                Err(e) => tracing::error!(error = %e, "no runtime for the full check"),
            }
            store.set_full_check(None);
        });
    if let Err(e) = spawned {
        handle.set_full_check(None);
        tracing::error!(error = %e, "the full check could not start");
    }
    Ok(FullCheckStarted {
        id,
        already_running: false,
    })
}

/// A full check by id, for auditors.
pub async fn full_check(store: &Store, by: &User, id: i64) -> OpResult<FullCheckView> {
    require_auditor(by)?;
    let mut c = conn(store).await?;
    checkpoint::full_check_by_id(&mut c, id)
        .await?
        .map(|check| FullCheckView::of(&check))
        .ok_or_else(|| OpError::NotFound(format!("no full check {id}")))
}

/// Records that a full check starts; its id.
async fn record_start(store: &Store, requested_by: &str) -> OpResult<i64> {
    let (total, _) = events::head(&mut conn(store).await?).await?;
    Ok(checkpoint::start_full(store, requested_by, store.now(), total).await?)
}

/// The full check, run here and now (the command line), recorded where the database lets it
/// (a read-only role still gets its answer).
pub(super) async fn run(
    store: &Store,
    requested_by: &str,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    let id = match record_start(store, requested_by).await {
        Ok(id) => Some(id),
        Err(e) => {
            tracing::warn!(error = %e, "the full check runs without being recorded");
            None
        }
    };
    run_recorded(store, id, known).await
}

/// Runs the full check, writing its progress and finding under `id` (when recorded), and
/// moves the checkpoint: to the head when the chain held, back to the start when it did not.
async fn run_recorded(
    store: &Store,
    id: Option<i64>,
    known: Option<(i64, String)>,
) -> OpResult<Verification> {
    let progress = Arc::new(AtomicI64::new(0));
    let done = Arc::new(AtomicBool::new(false));
    if let Some(id) = id {
        let (store, progress, done) = (store.clone(), progress.clone(), done.clone());
        tokio::spawn(async move {
            loop {
                tokio::time::sleep(PROGRESS_EVERY).await;
                if done.load(Ordering::Relaxed) {
                    break;
                }
                let n = progress.load(Ordering::Relaxed);
                if let Err(e) = checkpoint::full_progress(&store, id, n).await {
                    tracing::debug!(error = %e, "progress not written this time");
                }
            }
        });
    }
    let found = audited::check(store, known, &progress).await;
    done.store(true, Ordering::Relaxed);
    let found = found?;
    let at = store.now();
    let moved = match &found {
        Finding::Ok { events, head } | Finding::Tables { events, head, .. } => {
            checkpoint::advance(store, *events, head, at).await
        }
        Finding::Chain(_) | Finding::Unreadable(_) => checkpoint::reset(store).await,
    };
    if let Err(e) = moved {
        tracing::warn!(error = %e, "the audit checkpoint was not moved");
    }
    let v = Verification::from_finding(found);
    if let Some(id) = id {
        let json = serde_json::to_string(&v).expect("a verification serialises");
        let n = progress.load(Ordering::Relaxed);
        if let Err(e) = checkpoint::finish_full(store, id, at, n, &json).await {
            tracing::warn!(error = %e, check = id, "the full check's finding was not recorded");
        }
    }
    Ok(v)
}

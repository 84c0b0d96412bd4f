//! History uploads: who may, reading the file, and storing it whole or not at all, as a new
//! history swapped in beside the upload's event (docs/architecture.md, "History uploads").

use serde::Serialize;
use sha2::{Digest, Sha256};

use super::{OpError, OpResult};
use crate::domain::Metric;
use crate::domain::Role;
use crate::domain::User;
use crate::domain::observations::{self, Observation, RowProblem};
use crate::store::observations::{Mode, Written};
use crate::store::{Actor, Store, StoreError, metrics, observations as rows};

/// How an upload is written.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Format {
    Csv,
    Json,
}

/// Who is uploading: a person through the API or pages, or the command line.
pub enum Uploader<'a> {
    User(&'a User),
    Cli,
}

/// What an upload did, as the API answers it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct UploadReport {
    pub metric: String,
    pub mode: Mode,
    /// Observations in the upload.
    pub rows: u64,
    pub added: u64,
    pub replaced: u64,
    pub removed: u64,
    /// Periods stored afterwards.
    pub total: u64,
    /// Hex SHA-256 of the uploaded bytes, as recorded in the event.
    pub sha256: String,
    /// The event that records the upload.
    pub event_seq: i64,
}

/// Owners of the metric and admins may change its history.
fn may_upload(by: &Uploader<'_>, metric: &Metric) -> OpResult<()> {
    match by {
        Uploader::Cli => Ok(()),
        Uploader::User(u) if u.roles.has(Role::Admin) || metric.is_owner(&u.username) => Ok(()),
        Uploader::User(_) => Err(OpError::Forbidden(
            "only the metric's owners or an admin may upload its history".into(),
        )),
    }
}

/// Checks, before a body is read, that `by` may upload history for `key` (the upload checks
/// again inside its transaction).
pub async fn may_upload_to(store: &Store, by: &Uploader<'_>, key: &str) -> OpResult<()> {
    let metric = metrics::get(store, key).await?;
    may_upload(by, &metric)
}

/// Reads an upload; every bad line is named.
pub fn parse(
    format: Format,
    bytes: &[u8],
    progress: impl FnMut(u64),
) -> Result<Vec<Observation>, Vec<RowProblem>> {
    match format {
        Format::Csv => observations::from_csv(bytes, progress),
        Format::Json => observations::from_json_bytes(bytes),
    }
}

/// Checks and stores an upload: all of it or, with any bad line, none of it. Who may is
/// checked before what they sent; the parsing runs off the async threads.
pub async fn upload(
    store: &Store,
    by: Uploader<'_>,
    key: &str,
    mode: Mode,
    format: Format,
    bytes: bytes::Bytes,
) -> OpResult<UploadReport> {
    let metric = metrics::get(store, key).await?;
    may_upload(&by, &metric)?;
    // Hashing and reading tens of megabytes is CPU work: off the async threads.
    let (sha256, parsed) = tokio::task::spawn_blocking(move || {
        (
            hex::encode(Sha256::digest(&bytes)),
            parse(format, &bytes, |_| {}),
        )
    })
    .await
    .map_err(|e| StoreError::Config(format!("parsing stopped: {e}")))?;
    let parsed = parsed.map_err(OpError::InvalidRows)?;
    store_rows(store, by, key, mode, &parsed, &sha256, |_| {}).await
}

/// How many times a merge is built again when another upload to the same metric finished
/// while it was being built.
const MERGE_ATTEMPTS: usize = 3;

/// Stores observations already read whole and checked, with the upload event;
/// `progress` hears how many rows are written.
///
/// The rows go into a new history outside the event record's write lock, a short transaction
/// at a time; under the lock, one small update makes it the live history, beside the event.
/// A merge copies the periods it does not replace from the live history first, and is built
/// again if another upload changed the live history meanwhile.
pub async fn store_rows(
    store: &Store,
    by: Uploader<'_>,
    key: &str,
    mode: Mode,
    parsed: &[Observation],
    sha256: &str,
    mut progress: impl FnMut(u64),
) -> OpResult<UploadReport> {
    let metric = metrics::get(store, key).await?;
    may_upload(&by, &metric)?;
    if mode == Mode::Merge && parsed.len() <= rows::ROWS_PER_TRANSACTION {
        let report = merge_small(store, &by, key, parsed, sha256).await?;
        progress(parsed.len() as u64);
        return Ok(report);
    }
    for _ in 0..MERGE_ATTEMPTS {
        let base = rows::live(&mut store.read().await?, metric.id).await?;
        let building = Building::start(store, metric.id).await?;
        let built = build(store, &building, mode, base, parsed, &mut progress).await;
        let stored = match built {
            Ok(copied) => {
                let upload = Upload {
                    key,
                    mode,
                    history: building.id,
                    base,
                    uploaded: parsed.len() as u64,
                    copied,
                    sha256,
                };
                put_live(store, &by, upload).await
            }
            Err(e) => Err(e),
        };
        match stored {
            Ok(Some((report, retired))) => {
                building.made_live();
                if let Some(old) = retired {
                    spawn_discard(store, old);
                }
                return Ok(report);
            }
            // Another upload went first: build again on its history.
            Ok(None) => building.discard().await,
            Err(e) => {
                building.discard().await;
                return Err(e);
            }
        }
    }
    Err(OpError::Conflict(format!(
        "other uploads to {key} kept changing its history while this one was written; nothing was changed, send it again"
    )))
}

/// Fills the new history: the upload, then (merging) the live periods it does not replace.
/// Returns how many were copied from the live history.
async fn build(
    store: &Store,
    building: &Building,
    mode: Mode,
    base: Option<rows::Live>,
    parsed: &[Observation],
    progress: &mut impl FnMut(u64),
) -> OpResult<u64> {
    rows::add(store, building.id, parsed, progress).await?;
    Ok(match (mode, base) {
        (Mode::Merge, Some(base)) => rows::copy_missing(store, base.id, building.id).await?,
        _ => 0,
    })
}

/// A built history on its way to becoming live.
struct Upload<'a> {
    key: &'a str,
    mode: Mode,
    history: i64,
    /// The live history the merge was built on.
    base: Option<rows::Live>,
    uploaded: u64,
    copied: u64,
    sha256: &'a str,
}

/// A merge of a few rows, straight into the live history under the write lock, with its
/// event.
async fn merge_small(
    store: &Store,
    by: &Uploader<'_>,
    key: &str,
    parsed: &[Observation],
    sha256: &str,
) -> OpResult<UploadReport> {
    let mut w = store.begin_write().await?;
    let metric = metrics::get_for_update(&mut w, key).await?;
    may_upload(by, &metric)?;
    let written = rows::merge_into_live(&mut w, metric.id, parsed).await?;
    let report = record_upload(
        &mut w,
        by,
        &metric,
        Mode::Merge,
        parsed.len() as u64,
        sha256,
        written,
    )
    .await?;
    w.commit().await?;
    Ok(report)
}

/// Records the upload's event in its write transaction; the report the API answers.
async fn record_upload(
    w: &mut crate::store::WriteTx,
    by: &Uploader<'_>,
    metric: &Metric,
    mode: Mode,
    uploaded: u64,
    sha256: &str,
    written: Written,
) -> OpResult<UploadReport> {
    let actor = match by {
        Uploader::User(u) => Actor::User(u.username.to_string()),
        Uploader::Cli => Actor::Cli,
    };
    let event_seq = w
        .record(
            &actor,
            "observations.uploaded",
            &metric.subject(),
            serde_json::json!({
                "mode": mode.as_str(),
                "rows": uploaded,
                "sha256": sha256,
                "added": written.added,
                "replaced": written.replaced,
                "removed": written.removed,
                "total": written.total,
            }),
        )
        .await?;
    Ok(UploadReport {
        metric: metric.key.to_string(),
        mode,
        rows: uploaded,
        added: written.added,
        replaced: written.replaced,
        removed: written.removed,
        total: written.total,
        sha256: sha256.to_string(),
        event_seq,
    })
}

/// Under the write lock: checks the uploader again, swaps the new history in and records the
/// event. `None` when a merge's base is no longer live; otherwise the report and the history
/// that was retired.
async fn put_live(
    store: &Store,
    by: &Uploader<'_>,
    u: Upload<'_>,
) -> OpResult<Option<(UploadReport, Option<i64>)>> {
    let mut w = store.begin_write().await?;
    let metric = metrics::get_for_update(&mut w, u.key).await?;
    may_upload(by, &metric)?;
    let before = rows::live(w.conn(), metric.id).await?;
    let written = match u.mode {
        Mode::Merge => {
            if before.map(|l| l.id) != u.base.map(|l| l.id) {
                return Ok(None);
            }
            let replaced = before.map_or(0, |l| l.rows) - u.copied;
            Written {
                added: u.uploaded - replaced,
                replaced,
                removed: 0,
                total: u.uploaded + u.copied,
            }
        }
        Mode::Replace => Written {
            added: u.uploaded,
            replaced: 0,
            removed: before.map_or(0, |l| l.rows),
            total: u.uploaded,
        },
    };
    rows::put_live(&mut w, metric.id, u.history, written.total).await?;
    let report = record_upload(&mut w, by, &metric, u.mode, u.uploaded, u.sha256, written).await?;
    w.commit().await?;
    Ok(Some((report, before.map(|l| l.id))))
}

/// A history being built. Unless it was made live, it is deleted: at once on an error, and
/// in the background when the upload is dropped half way (its client went away).
struct Building {
    store: Store,
    id: i64,
    settled: bool,
}

impl Building {
    async fn start(store: &Store, metric_id: i64) -> OpResult<Building> {
        Ok(Building {
            store: store.clone(),
            id: rows::start(store, metric_id).await?,
            settled: false,
        })
    }

    fn made_live(mut self) {
        self.settled = true;
    }

    async fn discard(mut self) {
        self.settled = true;
        if let Err(e) = rows::discard(&self.store, self.id).await {
            tracing::warn!(error = %e, history = self.id, "an unfinished upload stays until the next sweep");
        }
    }
}

impl Drop for Building {
    fn drop(&mut self) {
        if !self.settled {
            spawn_discard(&self.store, self.id);
        }
    }
}

/// Deletes a history that is not live, in the background (a sweep catches it otherwise).
fn spawn_discard(store: &Store, history: i64) {
    let Ok(runtime) = tokio::runtime::Handle::try_current() else {
        return;
    };
    let store = store.clone();
    runtime.spawn(async move {
        if let Err(e) = rows::discard(&store, history).await {
            tracing::warn!(error = %e, history, "a history that is not live stays until the next sweep");
        }
    });
}

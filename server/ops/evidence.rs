//! A metric's history as evidence: uploads, the statistics of a window, backtests of versions
//! and proposals, and the warnings a reviewer needs.

use serde::Serialize;
use sha2::{Digest, Sha256};

use super::{OpError, OpResult};
use crate::domain::observations::{self, Observation, RowProblem};
use crate::domain::thresholds::{CutSet, Shades};
use crate::domain::{Role, Timestamp};
use crate::engine::backtest::{self, Backtest, Difference};
use crate::engine::stats::{self, LIMITS_MIN_POINTS, ProcessLimits, Summary};
use crate::engine::warnings::{self, Warning};
use crate::engine::{Side, Zone};
use crate::store::metrics::Metric;
use crate::store::observations::{Mode, Written};
use crate::store::users::User;
use crate::store::versions::VersionRecord;
use crate::store::{Actor, Store, StoreError, metrics, observations as rows, proposals, versions};

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
    #[schema(value_type = String)]
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
        Uploader::User(u) => Actor::User(u.username.clone()),
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

/// The window of history a request looks at: `from` inclusive, `to` exclusive.
#[derive(Clone, Copy, Debug, Default)]
pub struct Window {
    pub from: Option<Timestamp>,
    pub to: Option<Timestamp>,
}

/// Which cut set a backtest is of.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Subject {
    /// `version` or `proposal`.
    pub kind: &'static str,
    /// The version number, or the proposal's revision number.
    pub number: i64,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub proposal: Option<i64>,
    #[schema(value_type = String)]
    pub direction: &'static str,
    #[schema(value_type = Object)]
    pub cuts: serde_json::Value,
    pub shades: u8,
}

/// A backtest as the API answers it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct BacktestView {
    #[serde(rename = "of")]
    pub subject: Subject,
    #[serde(flatten)]
    #[schema(value_type = Object)]
    pub result: Backtest,
    /// What a reviewer should know about this cut set over the window.
    #[schema(value_type = Vec<Object>)]
    pub warnings: Vec<Warning>,
}

/// A period where two cut sets disagree.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct DifferenceView {
    #[schema(value_type = String)]
    pub period_start: Timestamp,
    pub value: f64,
    /// Zone (and band side) under the first cut set, e.g. `intervene` or `critical (low)`.
    pub first: String,
    pub second: String,
}

/// The statistics and the backtest of the version in force over a window.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct Evidence {
    pub metric: String,
    #[schema(value_type = Option<String>)]
    pub from: Option<Timestamp>,
    #[schema(value_type = Option<String>)]
    pub to: Option<Timestamp>,
    pub count: usize,
    #[schema(value_type = Option<String>)]
    pub first_period: Option<Timestamp>,
    #[schema(value_type = Option<String>)]
    pub last_period: Option<Timestamp>,
    pub mean: Option<f64>,
    pub sd: Option<f64>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    #[schema(value_type = Option<Object>)]
    pub percentiles: Option<stats::Percentiles>,
    /// Natural process limits over the window (null with fewer than two periods).
    #[schema(value_type = Option<Object>)]
    pub limits: Option<ProcessLimits>,
    /// False with fewer than 20 periods (common practice in SPC texts).
    pub limits_dependable: bool,
    /// The backtest of the version in force (null when none is).
    pub backtest: Option<BacktestView>,
}

/// The history of a window and what is known about it.
pub struct History {
    pub metric: Metric,
    pub points: Vec<Observation>,
    pub summary: Option<Summary>,
    pub limits: Option<ProcessLimits>,
}

impl History {
    pub fn values(&self) -> Vec<f64> {
        self.points.iter().map(|o| o.value).collect()
    }

    pub fn points(&self) -> Vec<(Timestamp, f64)> {
        self.points
            .iter()
            .map(|o| (o.period_start, o.value))
            .collect()
    }
}

/// Reads a window of a metric's history and works out its statistics.
pub async fn history(store: &Store, metric: Metric, window: Window) -> OpResult<History> {
    if let (Some(f), Some(t)) = (window.from, window.to)
        && f >= t
    {
        return Err(OpError::Invalid(crate::domain::metric::Problems::single(
            "from",
            "from must be before to",
        )));
    }
    let mut conn = store.read().await?;
    let points = rows::list(&mut conn, metric.id, window.from, window.to).await?;
    drop(conn);
    let values: Vec<f64> = points.iter().map(|o| o.value).collect();
    let (summary, limits) = tokio::task::spawn_blocking(move || {
        (stats::summary(&values), stats::process_limits(&values))
    })
    .await
    .map_err(|e| StoreError::Config(format!("statistics stopped: {e}")))?;
    Ok(History {
        metric,
        points,
        summary,
        limits,
    })
}

fn subject_of_version(v: &VersionRecord) -> Subject {
    Subject {
        kind: "version",
        number: v.number,
        proposal: None,
        direction: v.content.direction().as_str(),
        cuts: cuts_json(&v.content.cuts),
        shades: v.content.shades.get(),
    }
}

fn cuts_json(cuts: &CutSet) -> serde_json::Value {
    cuts.named()
        .iter()
        .map(|(k, v)| ((*k).to_string(), serde_json::json!(v)))
        .collect::<serde_json::Map<_, _>>()
        .into()
}

/// The backtest of one cut set over a history, with its warnings.
pub fn backtest_view(
    subject: Subject,
    cuts: &CutSet,
    shades: Shades,
    history: &History,
    critical_share: f64,
) -> BacktestView {
    let result = backtest::backtest(cuts, shades, &history.values());
    let warnings = warnings::warnings(cuts, &result, history.limits.as_ref(), critical_share);
    BacktestView {
        subject,
        result,
        warnings,
    }
}

fn status_text((zone, side): (Zone, Option<Side>)) -> String {
    match side {
        Some(Side::Low) => format!("{} (low)", zone.as_str()),
        Some(Side::High) => format!("{} (high)", zone.as_str()),
        None => zone.as_str().to_string(),
    }
}

/// The periods where two cut sets disagree over a history.
pub fn differences(
    first: (&CutSet, Shades),
    second: (&CutSet, Shades),
    history: &History,
) -> Vec<DifferenceView> {
    let values = history.values();
    let a = backtest::grades(first.0, first.1, &values);
    let b = backtest::grades(second.0, second.1, &values);
    backtest::differences(&a, &b)
        .into_iter()
        .map(
            |Difference {
                 index,
                 first,
                 second,
             }| DifferenceView {
                period_start: history.points[index].period_start,
                value: history.points[index].value,
                first: status_text(first),
                second: status_text(second),
            },
        )
        .collect()
}

/// Checks a chosen critical share.
pub fn critical_share(requested: Option<f64>) -> OpResult<f64> {
    match requested {
        None => Ok(warnings::DEFAULT_CRITICAL_SHARE),
        Some(s) if (0.0..=1.0).contains(&s) => Ok(s),
        Some(_) => Err(OpError::Invalid(crate::domain::metric::Problems::single(
            "critical_share",
            "critical_share must be a number from 0 to 1",
        ))),
    }
}

/// The evidence of a metric over a window: statistics, limits, and the version in force's
/// backtest.
pub async fn evidence(
    store: &Store,
    key: &str,
    window: Window,
    critical_share: f64,
) -> OpResult<Evidence> {
    let metric = metrics::get(store, key).await?;
    let now = store.now();
    let in_force = {
        let mut conn = store.read().await?;
        versions::in_force(&mut conn, metric.id, now, now).await?
    };
    let history = history(store, metric, window).await?;
    let backtest = in_force.as_ref().map(|v| {
        backtest_view(
            subject_of_version(v),
            &v.content.cuts,
            v.content.shades,
            &history,
            critical_share,
        )
    });
    let s = history.summary;
    let evidence = Evidence {
        metric: history.metric.key.to_string(),
        from: window.from,
        to: window.to,
        count: history.points.len(),
        first_period: history.points.first().map(|o| o.period_start),
        last_period: history.points.last().map(|o| o.period_start),
        mean: s.map(|s| s.mean),
        sd: s.and_then(|s| s.sd),
        min: s.map(|s| s.min),
        max: s.map(|s| s.max),
        percentiles: s.map(|s| s.percentiles),
        limits: history.limits,
        limits_dependable: history.points.len() >= LIMITS_MIN_POINTS,
        backtest,
    };
    Ok(evidence)
}

/// A proposal's backtest beside the version it would replace.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct ProposalBacktest {
    pub proposal: i64,
    pub metric: String,
    pub count: usize,
    #[schema(value_type = Option<Object>)]
    pub limits: Option<ProcessLimits>,
    /// The proposal's revision (the latest unless the request named one).
    pub backtest: BacktestView,
    /// The version it is compared with (the latest approved before it), if any.
    pub compared_with: Option<BacktestView>,
    /// Periods whose zone differs: `first` under the compared version, `second` under the
    /// proposal.
    pub differences: Vec<DifferenceView>,
}

/// The backtest of a proposal's revision (the latest unless one is named) and of the version
/// it is compared with.
pub async fn proposal_backtest(
    store: &Store,
    id: i64,
    revision: Option<i64>,
    window: Window,
    critical_share: f64,
) -> OpResult<ProposalBacktest> {
    let (bundle, previous) = {
        let mut conn = store.read().await?;
        let bundle = proposals::bundle(&mut conn, id)
            .await?
            .ok_or_else(|| StoreError::NotFound(format!("no proposal with id {id}")))?;
        let previous = super::proposals::compared_version(&mut conn, &bundle.proposal).await?;
        (bundle, previous)
    };
    let latest = match revision {
        None => bundle.latest(),
        Some(n) => bundle
            .revisions
            .iter()
            .find(|r| r.number == n)
            .ok_or_else(|| StoreError::NotFound(format!("proposal {id} has no revision {n}")))?,
    };
    let metric = metrics::get(store, &bundle.proposal.metric_key).await?;
    let history = history(store, metric, window).await?;
    let content = &latest.content;
    let tested = Tested {
        subject: Subject {
            kind: "proposal",
            number: latest.number,
            proposal: Some(id),
            direction: content.direction().as_str(),
            cuts: cuts_json(&content.cuts),
            shades: content.shades.get(),
        },
        cuts: &content.cuts,
        shades: content.shades,
    };
    let (backtest, compared_with, differences) = compared(
        &history,
        tested,
        previous.as_ref().map(Tested::version),
        critical_share,
    );
    Ok(ProposalBacktest {
        proposal: id,
        metric: history.metric.key.to_string(),
        count: history.points.len(),
        limits: history.limits,
        backtest,
        compared_with,
        differences,
    })
}

/// A version's backtest, optionally beside another version.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct VersionBacktest {
    pub metric: String,
    pub count: usize,
    #[schema(value_type = Option<Object>)]
    pub limits: Option<ProcessLimits>,
    pub backtest: BacktestView,
    pub compared_with: Option<BacktestView>,
    /// Periods whose zone differs: `first` under `compared_with`, `second` under this version.
    pub differences: Vec<DifferenceView>,
}

/// The backtest of version `number` of a metric (any version: in force, past or scheduled),
/// optionally compared with version `compare`.
pub async fn version_backtest(
    store: &Store,
    key: &str,
    number: i64,
    compare: Option<i64>,
    window: Window,
    critical_share: f64,
) -> OpResult<VersionBacktest> {
    let metric = metrics::get(store, key).await?;
    let all = {
        let mut conn = store.read().await?;
        versions::list(&mut conn, metric.id).await?
    };
    let find = |n: i64| {
        all.iter()
            .find(|v| v.number == n)
            .cloned()
            .ok_or_else(|| StoreError::NotFound(format!("{key} has no version {n}")))
    };
    let version = find(number)?;
    let other = compare.map(find).transpose()?;
    let history = history(store, metric, window).await?;
    let (backtest, compared_with, differences) = compared(
        &history,
        Tested::version(&version),
        other.as_ref().map(Tested::version),
        critical_share,
    );
    Ok(VersionBacktest {
        metric: history.metric.key.to_string(),
        count: history.points.len(),
        limits: history.limits,
        backtest,
        compared_with,
        differences,
    })
}

/// A cut set to backtest, with what the answer calls it.
struct Tested<'a> {
    subject: Subject,
    cuts: &'a CutSet,
    shades: Shades,
}

impl<'a> Tested<'a> {
    fn version(v: &'a VersionRecord) -> Tested<'a> {
        Tested {
            subject: subject_of_version(v),
            cuts: &v.content.cuts,
            shades: v.content.shades,
        }
    }
}

/// The backtest of `tested` and, when given, of `other` beside it, with the periods where
/// they differ (`first` under `other`, `second` under `tested`).
fn compared(
    history: &History,
    tested: Tested<'_>,
    other: Option<Tested<'_>>,
    critical_share: f64,
) -> (BacktestView, Option<BacktestView>, Vec<DifferenceView>) {
    let differences = other
        .as_ref()
        .map(|o| differences((o.cuts, o.shades), (tested.cuts, tested.shades), history))
        .unwrap_or_default();
    let view = |t: Tested<'_>| backtest_view(t.subject, t.cuts, t.shades, history, critical_share);
    (view(tested), other.map(view), differences)
}

/// A window of stored observations, for the API's listing.
pub async fn list(store: &Store, key: &str, window: Window) -> OpResult<Vec<Observation>> {
    let metric = metrics::get(store, key).await?;
    let mut conn = store.read().await?;
    Ok(rows::list(&mut conn, metric.id, window.from, window.to).await?)
}

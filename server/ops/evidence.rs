//! A metric's history as evidence: the statistics of a window, backtests of versions and
//! proposals, and the warnings a reviewer needs (uploads are in `uploads`).

use std::collections::BTreeMap;

use serde::Serialize;

use super::{OpError, OpResult};
use crate::domain::Direction;
use crate::domain::Metric;
use crate::domain::Timestamp;
use crate::domain::observations::Observation;
use crate::domain::proposal::cuts_object;
use crate::domain::thresholds::{CutSet, Shades};
use crate::engine::backtest::{self, Backtest, Difference};
use crate::engine::stats::{self, LIMITS_MIN_POINTS, ProcessLimits, Summary};
use crate::engine::warnings::{self, Warning};
use crate::engine::{Side, Zone};
use crate::store::versions::VersionRecord;
use crate::store::{Store, StoreError, metrics, observations as rows, proposals, versions};

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
    #[schema(value_type = Direction)]
    pub direction: &'static str,
    /// The four cut points by name.
    pub cuts: BTreeMap<&'static str, f64>,
    pub shades: u8,
}

/// A backtest as the API answers it.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct BacktestView {
    #[serde(rename = "of")]
    pub subject: Subject,
    #[serde(flatten)]
    pub result: Backtest,
    /// What a reviewer should know about this cut set over the window.
    pub warnings: Vec<Warning>,
}

/// A period where two cut sets disagree.
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct DifferenceView {
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
    pub from: Option<Timestamp>,
    pub to: Option<Timestamp>,
    pub count: usize,
    pub first_period: Option<Timestamp>,
    pub last_period: Option<Timestamp>,
    pub mean: Option<f64>,
    pub sd: Option<f64>,
    pub min: Option<f64>,
    pub max: Option<f64>,
    pub percentiles: Option<stats::Percentiles>,
    /// Natural process limits over the window (null with fewer than two periods).
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
        return Err(OpError::Invalid(crate::domain::Problems::single(
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
        cuts: cuts_object(&v.content.cuts),
        shades: v.content.shades.get(),
    }
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
        Some(_) => Err(OpError::Invalid(crate::domain::Problems::single(
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
    /// `backtest` is the proposal's revision (the latest unless the request named one),
    /// `compared_with` the version it is compared with (the latest approved before it), if
    /// any; in `differences`, `first` is under the compared version, `second` under the
    /// proposal.
    #[serde(flatten)]
    pub backtests: VersionBacktest,
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
            cuts: cuts_object(&content.cuts),
            shades: content.shades.get(),
        },
        cuts: &content.cuts,
        shades: content.shades,
    };
    Ok(ProposalBacktest {
        proposal: id,
        backtests: compared(
            &history,
            tested,
            previous.as_ref().map(Tested::version),
            critical_share,
        ),
    })
}

/// A version's backtest, optionally beside another version (`compared_with`).
#[derive(Clone, Debug, Serialize, utoipa::ToSchema)]
pub struct VersionBacktest {
    pub metric: String,
    pub count: usize,
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
    Ok(compared(
        &history,
        Tested::version(&version),
        other.as_ref().map(Tested::version),
        critical_share,
    ))
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
) -> VersionBacktest {
    let differences = other
        .as_ref()
        .map(|o| differences((o.cuts, o.shades), (tested.cuts, tested.shades), history))
        .unwrap_or_default();
    let view = |t: Tested<'_>| backtest_view(t.subject, t.cuts, t.shades, history, critical_share);
    VersionBacktest {
        metric: history.metric.key.to_string(),
        count: history.points.len(),
        limits: history.limits,
        backtest: view(tested),
        compared_with: other.map(view),
        differences,
    }
}

/// A window of stored observations, for the API's listing.
pub async fn list(store: &Store, key: &str, window: Window) -> OpResult<Vec<Observation>> {
    let metric = metrics::get(store, key).await?;
    let mut conn = store.read().await?;
    Ok(rows::list(&mut conn, metric.id, window.from, window.to).await?)
}

//! The evidence section shown on the metric, proposal and sign-off pages: the history chart,
//! a short summary of the statistics, each cut set's backtest, and the reviewer's warnings.
//! Also the history upload form's handler.

use axum::extract::{Multipart, Path, State};
use axum::http::StatusCode;
use axum::response::{IntoResponse, Redirect, Response};
use serde::Serialize;

use super::{Common, PageData, parse_key};
use crate::charts::history::{Bands, HistoryChart, LimitLines, history_chart};
use crate::domain::observations::Mode;
use crate::domain::thresholds::{CutSet, Shades};
use crate::domain::{Metric, MetricKey, number};
use crate::engine::warnings::{DEFAULT_CRITICAL_SHARE, percent, round_for_text};
use crate::ops::evidence::{self, History};
use crate::ops::uploads::{self, Format, Uploader};
use crate::ops::versions::VersionRecord;
use crate::web::AppState;
use crate::web::auth::{CSRF_FIELD, PageSession};
use crate::web::error::{ApiError, PageError};

/// A cut set the section shows, with the words for it.
pub struct Shown {
    /// "In force: version 3", "Proposed: revision 2".
    pub caption: String,
    /// The chart strip's heading: "in force", "scheduled", "proposed".
    pub short: &'static str,
    pub cuts: CutSet,
    pub shades: Shades,
}

impl Shown {
    pub fn version(v: &VersionRecord) -> Shown {
        Shown {
            caption: format!("In force: version {}", v.number),
            short: "in force",
            cuts: v.content.cuts,
            shades: v.content.shades,
        }
    }
}

/// What [`section`] is drawn from, owned, so that the drawing and the backtests of a long
/// history run off the serving thread (one busy page would otherwise hold up every other
/// connection of its thread).
pub struct SectionInput {
    pub metric_name: String,
    pub unit: String,
    pub history: History,
    pub in_force: Option<Shown>,
    pub proposal: Option<Shown>,
    pub window: evidence::Window,
    pub window_problem: Option<String>,
}

/// [`section`] on the blocking pool.
pub async fn section_off_thread(input: SectionInput) -> Result<EvidenceSection, PageError> {
    tokio::task::spawn_blocking(move || {
        section(
            "evidence",
            &input.metric_name,
            &input.unit,
            &input.history,
            input.in_force.as_ref(),
            input.proposal.as_ref(),
            (&input.window, input.window_problem),
        )
    })
    .await
    .map_err(|_| PageError(ApiError::internal()))
}

fn num(x: f64) -> String {
    number::format(round_for_text(x))
}

/// The window a page's `from` and `to` fields choose (dates or RFC 3339 times; `to` is not
/// included), with a message for the reader when one does not read as a time or the two are
/// the wrong way round (the page then shows the whole history).
pub fn window(from: &str, to: &str) -> (evidence::Window, Option<String>) {
    use crate::domain::Timestamp;
    let read = |name: &str, text: &str| match text.trim() {
        "" => Ok(None),
        t => Timestamp::parse(t)
            .map(Some)
            .map_err(|e| format!("{name}: {e}")),
    };
    match (read("from", from), read("to", to)) {
        (Ok(from), Ok(to)) if from.zip(to).is_some_and(|(f, t)| f >= t) => (
            evidence::Window::default(),
            Some("from must be before to; showing the whole history".into()),
        ),
        (Ok(from), Ok(to)) => (evidence::Window { from, to }, None),
        (Err(e), _) | (_, Err(e)) => (
            evidence::Window::default(),
            Some(format!("{e}; showing the whole history")),
        ),
    }
}

/// How many differing periods the page lists before saying how many more there are.
const DIFFERENCES_SHOWN: usize = 12;

/// The section's data, as `evidence.html` reads it under `evidence`.
#[derive(Debug, Serialize)]
pub struct EvidenceSection {
    pub window: WindowFields,
    /// The history chart (SVG).
    pub chart: String,
    /// Periods in the window.
    pub count: usize,
    /// The first and last periods' dates.
    pub first: Option<String>,
    pub last: Option<String>,
    pub summary: Option<SummaryFigures>,
    pub limits: Option<LimitFigures>,
    pub backtests: Vec<BacktestRow>,
    /// The reviewer's warnings about the judged cut set.
    pub warnings: Vec<String>,
    /// The caption of the cut set the warnings are about.
    pub judged: Option<String>,
    pub labels: SideLabels,
    /// Where the version in force and the proposal disagree; none unless both are shown.
    pub differences: Option<Differences>,
}

/// The window as its form shows it: dates, whether one was chosen, and why it was not used.
#[derive(Debug, Serialize)]
pub struct WindowFields {
    pub from: String,
    pub to: String,
    pub chosen: bool,
    pub problem: Option<String>,
}

/// The history's statistics, as text.
#[derive(Debug, Serialize)]
pub struct SummaryFigures {
    pub count: usize,
    pub mean: String,
    pub sd: Option<String>,
    pub min: String,
    pub max: String,
    pub p10: String,
    pub p50: String,
    pub p90: String,
}

/// The natural process limits, as text.
#[derive(Debug, Serialize)]
pub struct LimitFigures {
    pub lower: String,
    pub upper: String,
    pub mean: String,
    pub average_moving_range: String,
    /// Worked out from enough periods to go by.
    pub dependable: bool,
}

/// What one cut set would have said over the history.
#[derive(Debug, Serialize)]
pub struct BacktestRow {
    pub caption: String,
    pub zones: Vec<ZoneCount>,
    /// How often the status would have changed.
    pub changes: usize,
}

/// Periods in one zone, and their share as words ("25 %").
#[derive(Clone, Debug, Serialize)]
pub struct ZoneCount {
    pub name: &'static str,
    pub count: usize,
    pub share: String,
}

/// The short names of the two cut sets compared ("in force", "proposed").
#[derive(Debug, Serialize)]
pub struct SideLabels {
    pub first: &'static str,
    pub second: &'static str,
}

/// The periods whose zone would change: how many, the first few, and how many more.
#[derive(Debug, Serialize)]
pub struct Differences {
    pub count: usize,
    pub shown: Vec<DifferenceRow>,
    pub more: usize,
}

/// A period whose zone differs between the two cut sets.
#[derive(Debug, Serialize)]
pub struct DifferenceRow {
    pub period: String,
    pub value: String,
    pub first: String,
    pub second: String,
}

/// The metric and its evidence section: what `evidence.html` reads. Each page that includes
/// it flattens this into its own data.
#[derive(Clone, Copy, Debug, Serialize)]
pub struct MetricEvidence<'a> {
    pub metric: &'a Metric,
    pub evidence: &'a EvidenceSection,
}

impl PageData for MetricEvidence<'_> {
    const TEMPLATE: &'static str = "evidence.html";
}

/// The section's data. `judged` is the cut set the warnings are about (the proposal on a
/// proposal page, the version in force on a metric page).
pub fn section(
    id_prefix: &str,
    metric_name: &str,
    unit: &str,
    history: &History,
    in_force: Option<&Shown>,
    proposal: Option<&Shown>,
    window: (&evidence::Window, Option<String>),
) -> EvidenceSection {
    let points = history.points();
    let chart = history_chart(&HistoryChart {
        id_prefix,
        title: &format!("{metric_name}: history and zones"),
        unit,
        points: &points,
        in_force: in_force.map(|s| Bands {
            caption: &s.caption,
            short: s.short,
            cuts: &s.cuts,
        }),
        proposal: proposal.map(|s| Bands {
            caption: &s.caption,
            short: s.short,
            cuts: &s.cuts,
        }),
        limits: history.limits.map(|l| LimitLines {
            mean: l.mean,
            lower: l.lower,
            upper: l.upper,
        }),
    });
    let summary = history.summary.map(|s| SummaryFigures {
        count: s.count,
        mean: num(s.mean),
        sd: s.sd.map(num),
        min: num(s.min),
        max: num(s.max),
        p10: num(s.percentiles.p10),
        p50: num(s.percentiles.p50),
        p90: num(s.percentiles.p90),
    });
    let limits = history.limits.map(|l| LimitFigures {
        lower: num(l.lower),
        upper: num(l.upper),
        mean: num(l.mean),
        average_moving_range: num(l.average_moving_range),
        dependable: l.baseline_count >= crate::engine::stats::LIMITS_MIN_POINTS,
    });
    let judged = proposal.or(in_force);
    let values = history.values();
    let mut warnings: Vec<String> = Vec::new();
    let backtests: Vec<BacktestRow> = [in_force, proposal]
        .into_iter()
        .flatten()
        .map(|s| {
            let bt = crate::engine::backtest::backtest(&s.cuts, s.shades, &values);
            if judged.is_some_and(|j| std::ptr::eq(j, s)) {
                warnings = crate::engine::warnings::warnings(
                    &s.cuts,
                    &bt,
                    history.limits.as_ref(),
                    DEFAULT_CRITICAL_SHARE,
                )
                .into_iter()
                .map(|w| w.message)
                .collect();
            }
            let zones = crate::engine::backtest::zones_of(s.cuts.direction())
                .iter()
                .map(|z| ZoneCount {
                    name: z.as_str(),
                    count: bt.zones[z.as_str()],
                    share: percent(bt.zone_shares[z.as_str()]),
                })
                .collect();
            BacktestRow {
                caption: s.caption.clone(),
                zones,
                changes: bt.changes,
            }
        })
        .collect();
    let differences = match (in_force, proposal) {
        (Some(a), Some(b)) => {
            let all = evidence::differences((&a.cuts, a.shades), (&b.cuts, b.shades), history);
            Some(Differences {
                count: all.len(),
                shown: all
                    .iter()
                    .take(DIFFERENCES_SHOWN)
                    .map(|d| DifferenceRow {
                        period: d.period_start.as_datetime().format("%Y-%m-%d").to_string(),
                        value: number::format(d.value),
                        first: d.first.clone(),
                        second: d.second.clone(),
                    })
                    .collect(),
                more: all.len().saturating_sub(DIFFERENCES_SHOWN),
            })
        }
        _ => None,
    };
    let date = |t: Option<crate::domain::Timestamp>| {
        t.map(|t| t.as_datetime().format("%Y-%m-%d").to_string())
            .unwrap_or_default()
    };
    EvidenceSection {
        window: WindowFields {
            from: date(window.0.from),
            to: date(window.0.to),
            chosen: window.0.from.is_some() || window.0.to.is_some(),
            problem: window.1,
        },
        chart,
        count: history.points.len(),
        first: history.points.first().map(|o| date(Some(o.period_start))),
        last: history.points.last().map(|o| date(Some(o.period_start))),
        summary,
        limits,
        backtests,
        warnings,
        judged: judged.map(|s| s.caption.clone()),
        labels: SideLabels {
            first: in_force.map_or("in force", |s| s.short),
            second: proposal.map_or("proposed", |s| s.short),
        },
        differences,
    }
}

/// The upload form's answer when lines of the file are bad: each problem, and the metric to
/// go back to.
#[derive(Debug, Serialize)]
pub struct UploadRefused<'a> {
    pub key: &'a MetricKey,
    pub problems: Vec<String>,
}

impl PageData for UploadRefused<'_> {
    const TEMPLATE: &'static str = "observations_refused.html";
}

/// `POST /metrics/{key}/observations`: the upload form (a CSV file and a mode). Its CSRF
/// token travels in the multipart body as the first field, so it is checked here, before any
/// other field is read, against the session's (the middleware lets only this form through
/// unchecked).
pub async fn upload(
    State(state): State<AppState>,
    PageSession(session): PageSession,
    Path(key): Path<String>,
    mut form: Multipart,
) -> Result<Response, PageError> {
    let key = parse_key(&key)?;
    let unreadable = |e: axum::extract::multipart::MultipartError| {
        let status = e.status();
        PageError(ApiError::new(
            status,
            if status == StatusCode::PAYLOAD_TOO_LARGE {
                "too_large"
            } else {
                "bad_request"
            },
            format!("the form could not be read: {}", e.body_text()),
        ))
    };
    let bad = |m: String| PageError(ApiError::bad_request(m));
    let forged = || {
        PageError(ApiError::forbidden(
            "this form has expired or did not come from cutpoints: go back, reload the page and try again",
        ))
    };
    // The token is the form's first field, checked before any other field is read.
    let first = form.next_field().await.map_err(unreadable)?;
    let token = match first {
        Some(field) if field.name() == Some(CSRF_FIELD) => {
            field.text().await.map_err(unreadable)?
        }
        _ => return Err(forged()),
    };
    if !crate::auth::secret::constant_time_eq(&token, &session.csrf_token) {
        return Err(forged());
    }
    let mut mode = Mode::Merge;
    let mut file = None;
    while let Some(field) = form.next_field().await.map_err(unreadable)? {
        match field.name().unwrap_or("") {
            "mode" => {
                mode = match field.text().await.map_err(unreadable)?.as_str() {
                    "merge" => Mode::Merge,
                    "replace" => Mode::Replace,
                    other => return Err(bad(format!("mode {other:?}: expected merge or replace"))),
                }
            }
            "file" => file = Some(field.bytes().await.map_err(unreadable)?),
            _ => {}
        }
    }
    let Some(file) = file.filter(|f| !f.is_empty()) else {
        return Err(bad("choose a CSV file to upload".into()));
    };
    match uploads::upload(
        &state.store,
        Uploader::User(&session.user),
        key.as_str(),
        mode,
        Format::Csv,
        file,
    )
    .await
    {
        Ok(report) => Ok(Redirect::to(&format!(
            "/metrics/{}?uploaded={}",
            report.metric, report.rows
        ))
        .into_response()),
        Err(crate::ops::OpError::InvalidRows(rows)) => {
            let data = UploadRefused {
                key: &key,
                problems: rows.iter().map(|r| r.describe()).collect(),
            };
            let common = Common::new(Some(&session), "Upload refused", "register");
            Ok(super::render(StatusCode::BAD_REQUEST, &common, &data))
        }
        Err(e) => Err(e.into()),
    }
}

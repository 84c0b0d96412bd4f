//! Sample values of what the pages show (people, a metric, its versions, a proposal, the audit
//! views, a published set), made in memory with every optional part present, so that a sample
//! page takes as many of its template's branches as it can.

use serde_json::Value;

use crate::audit::{Entry, Event};
use crate::domain::access::{Scope, Session, TokenInfo};
use crate::domain::proposal::{ProposalState, ThresholdContent, Verdict, cuts_object};
use crate::domain::{CutSet, Direction, Metric, MetricKey, PersonRef, Role, Roles, Shades};
use crate::domain::{Timestamp, User, Username};
use crate::engine::canonical::{canonical_text, unified_diff};
use crate::engine::changes::compare;
use crate::engine::workflow::StillNeeded;
use crate::ops::audit::{
    AsOf, AsOfEntry, EventException, Exceptions, Extract, ExtractSummary, LapsedReview, Timeline,
    TimelineEntry, UnsignedVersion, VersionBrief,
};
use crate::ops::proposals::{
    Allowed, CommentView, Inbox, InboxItem, ProposalView, ReviewView, RevisionView,
    SIGNOFF_MEANING, SignoffView,
};
use crate::ops::publication::{Change, ChangeSide};
use crate::ops::versions::{VersionRecord, VersionStatus, VersionView, view};
use crate::publish::Signer;
use crate::publish::document::{SetContent, document};
use crate::publish::withhold::Withheld;
use crate::web::pages::evidence::{
    BacktestRow, DifferenceRow, Differences, EvidenceSection, LimitFigures, SideLabels,
    SummaryFigures, WindowFields, ZoneCount,
};

pub const METRIC_KEY: &str = "docks.peak_availability";
const METRIC_NAME: &str = "Peak dock availability";

pub fn at(text: &str) -> Timestamp {
    Timestamp::parse(text).expect("a sample time")
}

fn username(text: &str) -> Username {
    Username::parse(text).expect("a sample username")
}

pub fn user(name: &str, display_name: &str, roles: &[Role]) -> User {
    User {
        id: 1,
        username: username(name),
        display_name: display_name.into(),
        roles: Roles::new(roles.iter().copied()),
        active: true,
        created_at: at("2026-01-05T09:00:00Z"),
    }
}

/// A signed-in admin who is also an auditor, so the layout shows every part of the navigation.
pub fn session() -> Session {
    Session {
        id_hash: "sample-session".into(),
        csrf_token: "sample-csrf-token".into(),
        user: user("root", "Ruth Root", &[Role::Admin, Role::Auditor]),
    }
}

fn owner() -> PersonRef {
    PersonRef {
        username: username("tomas"),
        display_name: "Tomas Novak".into(),
    }
}

/// A person as the proposal views show them.
fn person(name: &str, display_name: &str) -> PersonRef {
    PersonRef {
        username: username(name),
        display_name: display_name.into(),
    }
}

pub fn metric() -> Metric {
    Metric {
        id: 1,
        key: MetricKey::parse(METRIC_KEY).expect("a sample key"),
        name: METRIC_NAME.into(),
        description: "Share of docks with a bike at 8 am.".into(),
        unit: "%".into(),
        owners: vec![owner()],
        data_source: "Dock telemetry, daily".into(),
        review_cadence_months: Some(12),
        tags: vec!["fleet".into()],
        created_at: at("2026-01-05T09:00:00Z"),
        updated_at: at("2026-01-06T09:00:00Z"),
    }
}

fn cuts(values: [f64; 4]) -> CutSet {
    CutSet::new(Direction::HigherIsBetter, values).expect("sample cut points in order")
}

fn content(values: [f64; 4]) -> ThresholdContent {
    ThresholdContent {
        cuts: cuts(values),
        shades: Shades::new(3).expect("sample shades"),
        unit: "%".into(),
        effective_from: Some(at("2026-02-01T00:00:00Z")),
        rationale: "Peak demand needs most docks stocked.".into(),
    }
}

pub fn version_record(number: i64, values: [f64; 4]) -> VersionRecord {
    let content = content(values);
    VersionRecord {
        id: number,
        metric_id: 1,
        number,
        proposal_id: number,
        revision_number: 1,
        revision_hash: format!("{number:0>64}"),
        canonical_text: canonical_text(&content),
        content,
        effective_from: at("2026-02-01T00:00:00Z"),
        approved_at: at("2026-02-03T10:00:00Z"),
        approvers: vec!["Ana Reviewer".into()],
        signatory: Some("Sam Signatory".into()),
        metric_name: METRIC_NAME.into(),
        approval_seq: 10 + number,
    }
}

pub const FIRST_CUTS: [f64; 4] = [50.0, 70.0, 85.0, 95.0];
pub const IN_FORCE_CUTS: [f64; 4] = [55.0, 70.0, 88.0, 95.0];
const PROPOSED_CUTS: [f64; 4] = [55.0, 72.0, 88.0, 96.0];

/// The metric's versions, oldest first: one superseded, one in force, one scheduled.
pub fn versions() -> Vec<VersionView> {
    let records = [
        version_record(1, FIRST_CUTS),
        version_record(2, IN_FORCE_CUTS),
        version_record(3, PROPOSED_CUTS),
    ];
    let statuses = [
        VersionStatus::Superseded,
        VersionStatus::InForce,
        VersionStatus::Scheduled,
    ];
    records
        .iter()
        .zip(statuses)
        .enumerate()
        .map(|(i, (record, status))| view(record, i.checked_sub(1).map(|p| &records[p]), status))
        .collect()
}

fn revision(number: i64, values: [f64; 4], previous: Option<&RevisionView>) -> RevisionView {
    let content = content(values);
    let text = canonical_text(&content);
    let base = version_record(2, IN_FORCE_CUTS);
    RevisionView {
        number,
        hash: format!("{:0>64}", 70 + number),
        direction: Direction::HigherIsBetter.as_str(),
        cuts: cuts_object(&content.cuts),
        shades: content.shades.get(),
        unit: content.unit.clone(),
        effective_from: content.effective_from,
        rationale: content.rationale.clone(),
        diff_from_previous: previous
            .map(|p| unified_diff(&p.canonical_text, &text))
            .unwrap_or_default(),
        base_version: Some(base.number),
        diff_from_base: unified_diff(&base.canonical_text, &text),
        canonical_text: text,
        note: "Intervene a little earlier.".into(),
        author: person("tomas", "Tomas Novak"),
        created_at: at("2026-03-01T09:00:00Z"),
    }
}

/// A proposal in review, compared with the version in force, which the reader may do
/// everything with.
pub fn proposal() -> ProposalView {
    let first = revision(1, IN_FORCE_CUTS, None);
    let latest = revision(2, PROPOSED_CUTS, Some(&first));
    let reviewer = person("ana", "Ana Reviewer");
    ProposalView {
        id: 7,
        metric: METRIC_KEY.into(),
        state: ProposalState::InReview,
        author: person("tomas", "Tomas Novak"),
        created_at: at("2026-03-01T09:00:00Z"),
        updated_at: at("2026-03-02T09:00:00Z"),
        closed_at: None,
        close_reason: String::new(),
        sent_back_revision: Some(1),
        version: None,
        reviews: vec![ReviewView {
            reviewer,
            verdict: Verdict::Approve,
            revision_number: 2,
            revision_hash: latest.hash.clone(),
            comment: "Fits the last year.".into(),
            stale: false,
            counted: true,
            created_at: at("2026-03-02T09:00:00Z"),
        }],
        signoffs: vec![SignoffView {
            signer: person("sam", "Sam Signatory"),
            signed_as: "Sam Signatory".into(),
            meaning: SIGNOFF_MEANING.into(),
            revision_number: 1,
            revision_hash: first.hash.clone(),
            stale: true,
            counted: false,
            created_at: at("2026-03-01T12:00:00Z"),
        }],
        comments: vec![CommentView {
            author: person("ana", "Ana Reviewer"),
            cut: Some("intervene".into()),
            body: "Why 72?".into(),
            revision_number: 2,
            created_at: at("2026-03-02T08:00:00Z"),
        }],
        changes: compare(Some(&cuts(IN_FORCE_CUTS)), &cuts(PROPOSED_CUTS)),
        compared_with_version: Some(2),
        still_needed: StillNeeded::new(
            2,
            1,
            vec!["a critical-level cut point changes".into()],
            false,
        ),
        still_needed_text: "1 more reviewer approval and a signatory's sign-off".into(),
        reviewers_required: 2,
        allowed: Some(Allowed {
            revise: true,
            submit: true,
            approve: true,
            send_back: true,
            sign: true,
            withdraw: true,
            reject: true,
        }),
        latest_revision: latest.clone(),
        revisions: vec![first, latest],
    }
}

pub fn token(id: i64) -> TokenInfo {
    TokenInfo {
        id,
        username: "tomas".into(),
        prefix: "cp_12345".into(),
        scope: Scope::Read,
        label: "finance dashboard".into(),
        created_at: at("2026-01-10T09:00:00Z"),
        expires_at: Some(at("2027-01-10T09:00:00Z")),
        revoked_at: None,
        last_used_at: Some(at("2026-03-01T09:00:00Z")),
    }
}

pub fn timeline() -> Timeline {
    let p = proposal();
    let versions = versions();
    Timeline {
        metric: METRIC_KEY.into(),
        name: METRIC_NAME.into(),
        versions: vec![TimelineEntry {
            version: versions[1].clone(),
            reviews: p.reviews,
            signoffs: p.signoffs,
            comments: p.comments,
            revisions: 2,
        }],
    }
}

fn brief(number: i64, values: [f64; 4]) -> VersionBrief {
    VersionBrief {
        number,
        direction: Direction::HigherIsBetter.as_str(),
        cuts: cuts_object(&cuts(values)),
        cuts_text: "critical 55, intervene 70, outperform 88, stretch 95".into(),
        effective_from: at("2026-02-01T00:00:00Z"),
        approved_at: at("2026-02-03T10:00:00Z"),
        approvers: vec!["Ana Reviewer".into()],
        signatory: None,
    }
}

pub fn as_of() -> AsOf {
    AsOf {
        as_of: at("2026-02-02T00:00:00Z"),
        known_at: at("2026-02-02T00:00:00Z"),
        metrics: vec![AsOfEntry {
            metric: METRIC_KEY.into(),
            name: METRIC_NAME.into(),
            in_force: Some(brief(1, FIRST_CUTS)),
            known_later: Some(brief(2, IN_FORCE_CUTS)),
            note: "approved later with an earlier effective time".into(),
        }],
    }
}

fn event_exception(seq: i64, action: &str) -> EventException {
    EventException {
        seq,
        at: at("2026-03-01T09:00:00Z"),
        actor: "tomas".into(),
        action: action.into(),
        subject: "proposal:7".into(),
        details: Value::String("their own proposal".into()),
    }
}

pub fn exceptions() -> Exceptions {
    Exceptions {
        refused_decisions: vec![event_exception(20, "decision.refused")],
        stale_approvals: vec![event_exception(21, "review.stale")],
        approved_without_signoff: vec![UnsignedVersion {
            metric: METRIC_KEY.into(),
            version: 2,
            approved_at: at("2026-02-03T10:00:00Z"),
            signoff_required: true,
            reasons: vec!["the metric's first version".into()],
        }],
        missing_signoffs: 1,
        signin_failures: vec![event_exception(22, "signin.failed")],
        lapsed_reviews: vec![LapsedReview {
            metric: METRIC_KEY.into(),
            review_cadence_months: 12,
            last_reviewed: at("2025-01-01T00:00:00Z"),
            due: at("2026-01-01T00:00:00Z"),
        }],
    }
}

pub fn extract() -> Extract {
    let payload: Value = serde_json::from_str(
        r#"{"key":"docks.peak_availability","name":"Peak dock availability"}"#,
    )
    .expect("a sample payload");
    Extract {
        entries: vec![Entry {
            event: Event {
                seq: 1,
                at: at("2026-01-05T09:00:00Z"),
                actor: "root".into(),
                action: "metric.created".into(),
                subject: format!("metric:{METRIC_KEY}"),
                payload,
            },
            prev_hash: "00".repeat(32),
            hash: "ab".repeat(32),
        }],
        summary: ExtractSummary {
            count: 1,
            first_seq: Some(1),
            last_seq: Some(1),
            head_seq: 42,
            head_hash: "ab".repeat(32),
            next_after: Some(1),
        },
    }
}

pub fn inbox() -> Inbox {
    let item = InboxItem {
        proposal: 7,
        metric: METRIC_KEY.into(),
        state: ProposalState::InReview,
        updated_at: at("2026-03-02T09:00:00Z"),
        why: "your review".into(),
    };
    Inbox {
        to_review: vec![item.clone()],
        to_sign: vec![item],
        mine: Vec::new(),
    }
}

/// A signed published set with one metric, one without a version, and one withheld.
pub fn published_document() -> Value {
    let content = SetContent {
        set_revision: 2,
        in_force_since: Some(at("2026-02-03T10:00:00Z")),
        audit_head: format!("42:{}", "ab".repeat(32)),
        metrics_without_version: vec!["repairs.turnaround".into()],
        withheld: vec![Withheld {
            metric: "members.monthly_churn".into(),
            version: 1,
            reason: "the stored cut points differ from the approval".into(),
        }],
        versions: vec![(METRIC_KEY.into(), version_record(2, IN_FORCE_CUTS))],
        as_of: Some(at("2026-03-01T00:00:00Z")),
        known_at: None,
    };
    document(&content, &Signer::from_seed([7; 32]))
}

pub fn changes() -> Vec<Change> {
    let side = |version: i64, values: [f64; 4]| ChangeSide {
        version,
        direction: Direction::HigherIsBetter.as_str(),
        cuts: cuts_object(&cuts(values)),
        effective_from: at("2026-02-01T00:00:00Z"),
    };
    vec![Change {
        metric: METRIC_KEY.into(),
        change: "changed",
        old: Some(side(1, FIRST_CUTS)),
        new: Some(side(2, IN_FORCE_CUTS)),
    }]
}

/// An evidence section comparing the version in force with a proposal over a chosen window.
pub fn evidence() -> EvidenceSection {
    let zone = |name: &'static str, count: usize, share: &str| ZoneCount {
        name,
        count,
        share: share.into(),
    };
    let zones = vec![
        zone("critical", 1, "4 %"),
        zone("intervene", 5, "21 %"),
        zone("acceptable", 12, "50 %"),
        zone("outperform", 4, "17 %"),
        zone("stretch", 2, "8 %"),
    ];
    EvidenceSection {
        window: WindowFields {
            from: "2024-03-01".into(),
            to: "2026-03-01".into(),
            chosen: true,
            problem: Some("to: not a date; showing the whole history".into()),
        },
        chart: "<svg role=\"img\"></svg>".into(),
        count: 24,
        first: Some("2024-03-01".into()),
        last: Some("2026-02-01".into()),
        summary: Some(SummaryFigures {
            count: 24,
            mean: "78.5".into(),
            sd: Some("9.1".into()),
            min: "52".into(),
            max: "97".into(),
            p10: "66".into(),
            p50: "79".into(),
            p90: "91".into(),
        }),
        limits: Some(LimitFigures {
            lower: "55.2".into(),
            upper: "101.8".into(),
            mean: "78.5".into(),
            average_moving_range: "8.8".into(),
            dependable: true,
        }),
        backtests: vec![
            BacktestRow {
                caption: "Version 2".into(),
                zones: zones.clone(),
                changes: 6,
            },
            BacktestRow {
                caption: "revision 2 of proposal 7".into(),
                zones,
                changes: 7,
            },
        ],
        warnings: vec!["the critical zone holds no period of the history".into()],
        judged: Some("revision 2 of proposal 7".into()),
        labels: SideLabels {
            first: "in force",
            second: "proposed",
        },
        differences: Some(Differences {
            count: 13,
            shown: vec![DifferenceRow {
                period: "2025-06-01".into(),
                value: "71".into(),
                first: "acceptable".into(),
                second: "intervene".into(),
            }],
            more: 1,
        }),
    }
}

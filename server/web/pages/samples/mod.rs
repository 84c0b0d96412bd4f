//! A sample of every template's data, for the template check (tests/suite/page_templates.rs):
//! each sample is made into a context the way a handler's page is, so the check can render it
//! and compare the names its template reads with the page's fields. The server does not use
//! these.

mod fixtures;
mod verification;

use std::collections::BTreeSet;

use serde::Serialize;
use tera::Context;

use super::admin::{
    IssuedToken, NewPersonForm, NewPersonValues, PeoplePage, PersonPage, TokenFormValues,
    TokenHolder, TokenRow, TokensPage,
};
use super::audit::{
    AsOfFields, AsOfPage, AuditIndex, EventFilterFields, EventRow, EventsPage, ExceptionsPage,
    TimelinePage,
};
use super::evidence::{MetricEvidence, UploadRefused};
use super::metrics::{
    ClosedProposal, ListFilter, MetricDetail, MetricForm, MetricFormValues, MetricList,
};
use super::proposals::{
    InboxPage, ProposalForm, ProposalFormValues, ProposalPage, Revising, SignoffPage,
};
use super::published::{ChangesPage, PublishedMetric, PublishedPage};
use super::signin::SigninPage;
use super::{Common, PageData, field_errors};
use crate::domain::proposal::ProposalState;
use crate::domain::{Direction, MetricKey, Problems, Role};
use crate::web::error::ErrorPage;
use crate::web::layout;

/// One template's sample: its name, the context a handler would render it with, and the
/// names the page's own data defines (the common part's are [`common_keys`]).
pub struct Sample {
    pub template: &'static str,
    pub context: Context,
    pub page_keys: BTreeSet<String>,
}

/// The top-level names of a value that serializes as a map.
fn keys<T: Serialize>(value: &T) -> BTreeSet<String> {
    match serde_json::to_value(value) {
        Ok(serde_json::Value::Object(map)) => map.into_iter().map(|(k, _)| k).collect(),
        _ => BTreeSet::new(),
    }
}

fn sample<P: PageData>(common: &Common<'_>, data: &P) -> Sample {
    Sample {
        template: P::TEMPLATE,
        context: layout::context(common, data).expect("a sample makes a context"),
        page_keys: keys(data),
    }
}

/// The names every page's context has ([`Common`]).
pub fn common_keys() -> BTreeSet<String> {
    let session = fixtures::session();
    keys(&Common::new(Some(&session), "title", "register"))
}

/// Problems of a form, for the samples that re-show one.
fn problems() -> Problems {
    let mut p = Problems::default();
    p.add("name", "give the metric a name");
    p.add("intervene", "intervene must be greater than critical");
    p
}

/// Samples of every template's data; a template may have more than one, to take other
/// branches.
pub fn samples() -> Vec<Sample> {
    let session = fixtures::session();
    let signed_in = |title: &str| Common::new(Some(&session), title.to_string(), "register");
    let metric = fixtures::metric();
    let versions = fixtures::versions();
    let proposal = fixtures::proposal();
    let evidence = fixtures::evidence();
    let shown = || MetricEvidence {
        metric: &metric,
        evidence: &evidence,
    };
    let problems = problems();
    let mut out = vec![
        sample(
            &Common::new(None, "Not found", ""),
            &ErrorPage {
                heading: "Not found",
                message: "no metric with key \"x\"",
            },
        ),
        sample(
            &Common {
                csrf: "signin-token",
                ..Common::new(None, "Sign in", "signin")
            },
            &SigninPage {
                next: "/metrics",
                username: "tomas",
                error: Some("wrong username or password"),
            },
        ),
        sample(&signed_in("Evidence"), &shown()),
    ];
    out.extend(register_samples(
        &signed_in,
        &metric,
        &versions,
        &proposal,
        &shown(),
        &problems,
    ));
    out.extend(admin_samples(&signed_in));
    out.extend(proposal_samples(
        &signed_in,
        &metric,
        &proposal,
        &shown(),
        &problems,
    ));
    out.extend(audit_samples(&signed_in));
    out.extend(published_samples(&signed_in));
    out
}

fn register_samples<'a>(
    signed_in: &impl Fn(&str) -> Common<'a>,
    metric: &crate::domain::Metric,
    versions: &[crate::ops::versions::VersionView],
    proposal: &crate::ops::proposals::ProposalView,
    shown: &MetricEvidence<'_>,
    problems: &Problems,
) -> Vec<Sample> {
    let list = MetricList {
        metrics: std::slice::from_ref(metric),
        total: 30,
        page: 2,
        pages: 3,
        searching: true,
        filter: ListFilter {
            text: "dock",
            tag: "fleet",
            owner: "tomas",
        },
        prev_link: Some("/metrics?page=1".into()),
        next_link: Some("/metrics?page=3".into()),
    };
    let detail = MetricDetail {
        shown: *shown,
        can_edit: true,
        can_propose: true,
        can_upload: true,
        saved: Some("Your changes were saved."),
        uploaded: Some("The history was uploaded: 24 periods stored or updated.".into()),
        in_force: versions.get(1),
        in_force_cut_names: Direction::HigherIsBetter.cut_names().to_vec(),
        scheduled: versions.get(2),
        history: versions.iter().rev().collect(),
        open: Some(proposal),
        closed_proposals: vec![ClosedProposal {
            id: 5,
            state: ProposalState::Approved,
            updated_at: fixtures::at("2026-02-03T10:00:00Z"),
            version: Some(2),
        }],
        strip: "<svg role=\"img\"></svg>".into(),
    };
    let form = |creating: bool| MetricForm {
        action: "/metrics/new",
        cancel: "/metrics",
        creating,
        can_set_owners: creating,
        submit_label: "Add metric",
        values: MetricFormValues {
            key: fixtures::METRIC_KEY.into(),
            name: String::new(),
            description: "Share of docks".into(),
            unit: "%".into(),
            owners: "tomas, priya".into(),
            data_source: "telemetry".into(),
            review_cadence_months: "12".into(),
            tags: "fleet".into(),
        },
        errors: field_errors(problems),
        problems: &problems.0,
    };
    let key = MetricKey::parse(fixtures::METRIC_KEY).expect("a sample key");
    let refused = UploadRefused {
        key: &key,
        problems: vec!["line 3: \"abc\" is not a number".into()],
    };
    vec![
        sample(&signed_in("Metric register"), &list),
        sample(&signed_in(&metric.name), &detail),
        sample(&signed_in("Add a metric"), &form(true)),
        sample(&signed_in("Edit metric details"), &form(false)),
        sample(&signed_in("Upload refused"), &refused),
    ]
}

fn admin_samples<'a>(signed_in: &impl Fn(&str) -> Common<'a>) -> Vec<Sample> {
    let person = fixtures::user("tomas", "Tomas Novak", &[Role::Owner, Role::Reviewer]);
    let people = vec![person.clone()];
    let tokens = [fixtures::token(3), fixtures::token(4)];
    let rows = || {
        tokens
            .iter()
            .map(|info| TokenRow { info, usable: true })
            .collect::<Vec<_>>()
    };
    let problems = Problems::single("username", "there is already a person named tomas");
    let all_roles: Vec<&'static str> = Role::ALL.iter().map(|r| r.as_str()).collect();
    let new_person = NewPersonForm {
        values: NewPersonValues {
            username: "tomas".into(),
            display_name: "Tomas Novak".into(),
        },
        roles: all_roles.clone(),
        checked: vec!["owner".into()],
        errors: field_errors(&problems),
        problems: &problems.0,
    };
    let person_page = PersonPage {
        person: &person,
        person_roles: person.roles.iter().map(Role::as_str).collect(),
        roles: all_roles,
        tokens: rows(),
        notice: Some("Display name and roles saved."),
        errors: field_errors(&problems),
        is_me: false,
    };
    let tokens_page = TokensPage {
        tokens: rows(),
        people: people
            .iter()
            .map(|p| TokenHolder {
                username: &p.username,
                display_name: &p.display_name,
            })
            .collect(),
        issued: Some(IssuedToken {
            secret: "cp_12345_secret",
            info: &tokens[0],
        }),
        values: TokenFormValues {
            username: "tomas".into(),
            scope: "write".into(),
            label: "finance dashboard".into(),
            expires_in_days: "30".into(),
        },
        errors: field_errors(&problems),
    };
    vec![
        sample(&signed_in("People"), &PeoplePage { people: &people }),
        sample(&signed_in("Add a person"), &new_person),
        sample(&signed_in(&person.display_name), &person_page),
        sample(&signed_in("API tokens"), &tokens_page),
    ]
}

fn proposal_samples<'a>(
    signed_in: &impl Fn(&str) -> Common<'a>,
    metric: &crate::domain::Metric,
    proposal: &crate::ops::proposals::ProposalView,
    shown: &MetricEvidence<'_>,
    problems: &Problems,
) -> Vec<Sample> {
    let page = ProposalPage {
        p: proposal,
        shown: *shown,
        strip: "<svg role=\"img\"></svg>".into(),
        notice: Some("Submitted for review."),
        error: Some("you cannot approve your own proposal"),
        cut_names: Direction::HigherIsBetter.cut_names().to_vec(),
        older_revisions: proposal.revisions.iter().rev().skip(1).collect(),
    };
    let form = |revising: Option<Revising<'static>>| {
        let direction = Direction::HigherIsBetter;
        ProposalForm {
            metric,
            direction: direction.as_str(),
            directions: Direction::ALL.iter().map(|d| d.as_str()).collect(),
            cut_names: direction.cut_names(),
            action: "/metrics/docks.peak_availability/proposals/new",
            revising,
            values: ProposalFormValues {
                cuts: direction
                    .cut_names()
                    .into_iter()
                    .map(|n| (n, "70".to_string()))
                    .collect(),
                shades: "3".into(),
                unit: "%".into(),
                effective_from: "2027-01-01".into(),
                rationale: "Demand rose.".into(),
                note: "Intervene earlier.".into(),
            },
            errors: field_errors(problems),
            problems: &problems.0,
        }
    };
    let signoff = SignoffPage {
        p: proposal,
        shown: *shown,
        error: Some("the password is wrong"),
    };
    let inbox = fixtures::inbox();
    vec![
        sample(&signed_in("Proposal 7"), &page),
        sample(&signed_in("Propose thresholds"), &form(None)),
        sample(
            &signed_in("Revise the proposal"),
            &form(Some(Revising {
                hash: "0071",
                id: 7,
            })),
        ),
        sample(&signed_in("Sign off proposal 7"), &signoff),
        sample(&signed_in("Inbox"), &InboxPage { inbox: &inbox }),
    ]
}

fn audit_samples<'a>(signed_in: &impl Fn(&str) -> Common<'a>) -> Vec<Sample> {
    let metrics = vec![fixtures::metric()];
    let (verified, broken) = (
        verification::verification(true),
        verification::verification(false),
    );
    let timeline = fixtures::timeline();
    let as_of = fixtures::as_of();
    let fields = || AsOfFields {
        as_of: "2026-02-02",
        known_at: "",
        metric: fixtures::METRIC_KEY,
    };
    let exceptions = fixtures::exceptions();
    let extract = fixtures::extract();
    let events = EventsPage {
        x: &extract,
        q: EventFilterFields {
            metric: fixtures::METRIC_KEY,
            actor: "root",
            action: "metric.created",
            from: "2026-01-01",
            to: "",
        },
        query: "metric=docks.peak_availability".into(),
        entries: extract
            .entries
            .iter()
            .map(|e| EventRow {
                e,
                payload: "{\"key\":\"docks.peak_availability\"}".into(),
            })
            .collect(),
    };
    let index = |v| AuditIndex {
        v,
        metrics: &metrics,
    };
    vec![
        sample(&signed_in("Audit"), &index(&verified)),
        sample(&signed_in("Audit"), &index(&broken)),
        sample(&signed_in("Why it moved"), &TimelinePage { t: &timeline }),
        sample(
            &signed_in("What was in force"),
            &AsOfPage {
                view: Some(&as_of),
                error: None,
                q: fields(),
            },
        ),
        sample(
            &signed_in("What was in force"),
            &AsOfPage {
                view: None,
                error: Some("as_of: not a time".into()),
                q: fields(),
            },
        ),
        sample(&signed_in("Exceptions"), &ExceptionsPage { x: &exceptions }),
        sample(&signed_in("Event record"), &events),
    ]
}

fn published_samples<'a>(signed_in: &impl Fn(&str) -> Common<'a>) -> Vec<Sample> {
    let document = fixtures::published_document();
    let published = PublishedPage {
        meta: &document["meta"],
        metrics: vec![PublishedMetric {
            key: fixtures::METRIC_KEY,
            e: &document["set"][fixtures::METRIC_KEY],
            cuts: "critical 55, intervene 70, outperform 88, stretch 95".into(),
            strip: "<svg role=\"img\"></svg>".into(),
        }],
        signature: "verified with key k1 (current)".into(),
        query: "as_of=2026-03-01".into(),
        as_of: "2026-03-01",
        show_withheld: true,
    };
    let changes = |listed: bool| ChangesPage {
        current: 2,
        from: "1",
        to: "2",
        changes: listed.then(fixtures::changes),
        error: (!listed).then(|| "choose revisions with 0 <= from <= to <= 2".into()),
    };
    vec![
        sample(&signed_in("Published set"), &published),
        sample(&signed_in("Changes between set revisions"), &changes(true)),
        sample(&signed_in("Changes between set revisions"), &changes(false)),
    ]
}

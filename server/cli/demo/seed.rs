//! Seeding the demo scenario through the real operations: people and metrics first, then each
//! story's proposal taken through the workflow, then each metric's history uploaded, all at
//! invented past times.

use std::collections::BTreeMap;

use chrono::{Datelike, Months};

use super::history::history_csv;
use super::scenario::{METRICS, PEOPLE, STORIES, Step, Story};
use crate::domain::User;
use crate::domain::metric::split_list;
use crate::domain::observations::Mode;
use crate::domain::proposal::{ContentInput, Verdict};
use crate::domain::{Direction, Roles, Timestamp, Username};
use crate::ops::Store;
use crate::ops::metrics::NewMetric;
use crate::ops::proposals::{self as flow, RevisionInput};
use crate::ops::users::{By, add_with_hash, hash_password};
use crate::ops::{OpError, OpResult};

/// How long before "now" the invented history starts: about eighteen months.
const HISTORY_DAYS: i64 = 548;
const DAY: i64 = 24 * 60 * 60;
/// Times of day (minutes after midnight UTC) the steps are recorded at, in turn, so the
/// history reads like office hours rather than one instant.
const WORKING_MINUTES: [i64; 6] = [
    9 * 60 + 10,
    10 * 60 + 45,
    14 * 60 + 20,
    11 * 60 + 5,
    16 * 60 + 30,
    13 * 60 + 15,
];

/// Seeds an empty database with the scenario; returns the people created.
///
/// Everything is recorded at invented past times, so the register looks lived in; the
/// store's clock is back on real time when this returns, whatever happened.
pub async fn seed(store: &Store) -> OpResult<Vec<User>> {
    let hashes = hash_demo_passwords().await;
    let _real_time_after = ClockReset(store);
    let mut timeline = Timeline::new(store, Timestamp::now());
    let people = add_people_and_metrics(store, &mut timeline, hashes).await?;
    for story in STORIES {
        tell(store, &mut timeline, &people, story).await?;
    }
    upload_histories(store, &mut timeline, &people).await?;
    Ok(people)
}

/// Each metric's owner uploads its invented history (CSV, through the same operation as the
/// upload page), ending before the upload.
async fn upload_histories(
    store: &Store,
    timeline: &mut Timeline<'_>,
    people: &[User],
) -> OpResult<()> {
    timeline.later()?;
    let end = timeline.at.unwrap_or(timeline.start);
    for m in METRICS {
        let owner = person(people, split_list(m.owners)[0].as_str());
        let csv = history_csv(m.key, end);
        crate::ops::uploads::upload(
            store,
            crate::ops::uploads::Uploader::User(owner),
            m.key,
            Mode::Replace,
            crate::ops::uploads::Format::Csv,
            csv.into_bytes().into(),
        )
        .await?;
        timeline.moment_later()?;
    }
    Ok(())
}

/// Puts the store back on the system clock when dropped: after success, an error, a panic
/// or a cancelled future alike, so the running demo never records invented times.
struct ClockReset<'a>(&'a Store);

impl Drop for ClockReset<'_> {
    fn drop(&mut self) {
        self.0.set_clock(None);
    }
}

/// The invented calendar: moves the store's clock forward, never back, and never up to the
/// real present.
struct Timeline<'a> {
    store: &'a Store,
    /// Midnight UTC on the first day of the history.
    start: Timestamp,
    /// The real time the seeding began; the history must end before it.
    real_now: Timestamp,
    day: i64,
    at: Option<Timestamp>,
    steps: usize,
}

impl<'a> Timeline<'a> {
    fn new(store: &'a Store, real_now: Timestamp) -> Timeline<'a> {
        let first = real_now.plus_seconds(-HISTORY_DAYS * DAY).as_datetime();
        let midnight = first
            .date_naive()
            .and_hms_opt(0, 0, 0)
            .expect("midnight exists")
            .and_utc();
        Timeline {
            store,
            start: Timestamp::from_datetime(midnight),
            real_now,
            day: 0,
            at: None,
            steps: 0,
        }
    }

    /// The next working time on `day` (days after the start); days must not go backwards.
    fn on_day(&mut self, day: i64) -> OpResult<()> {
        if day < self.day {
            return Err(scenario_error(format!(
                "day {day} comes before day {} already recorded; keep the stories in order",
                self.day
            )));
        }
        self.day = day;
        let minutes = WORKING_MINUTES[self.steps % WORKING_MINUTES.len()];
        self.steps += 1;
        self.set(self.start.plus_seconds(day * DAY + minutes * 60))
    }

    /// One to three days later, the next thing happens.
    fn later(&mut self) -> OpResult<()> {
        self.on_day(self.day + 1 + (self.steps % 3) as i64)
    }

    /// A few minutes later, the same sitting.
    fn moment_later(&mut self) -> OpResult<()> {
        let at = self.at.unwrap_or(self.start).plus_seconds(4 * 60);
        self.set(at)
    }

    fn set(&mut self, at: Timestamp) -> OpResult<()> {
        if self.at.is_some_and(|prev| at <= prev) || at >= self.real_now {
            return Err(scenario_error(format!(
                "invented time {at} is out of order or not in the past"
            )));
        }
        self.at = Some(at);
        self.store.set_clock(Some(at));
        Ok(())
    }
}

/// An error in the scenario itself (a step that did not do what the story says).
fn scenario_error(message: String) -> OpError {
    OpError::Conflict(format!("demo scenario: {message}"))
}

/// Day 0: the administrator registers everyone and the five metrics in one sitting.
async fn add_people_and_metrics(
    store: &Store,
    timeline: &mut Timeline<'_>,
    hashes: Vec<String>,
) -> OpResult<Vec<User>> {
    timeline.on_day(0)?;
    let mut people = Vec::new();
    for (person, hash) in PEOPLE.iter().zip(hashes) {
        let username = Username::parse(person.username).expect("demo usernames are valid");
        let roles = Roles::parse_list(person.roles).expect("demo roles are valid");
        people.push(
            add_with_hash(
                store,
                By::Operator,
                &username,
                person.display_name,
                &roles,
                &hash,
            )
            .await?,
        );
        timeline.moment_later()?;
    }
    let admin = people
        .iter()
        .find(|u| u.roles.has(crate::domain::Role::Admin))
        .expect("the scenario has an admin")
        .clone();
    for m in METRICS {
        let input = NewMetric {
            key: m.key.into(),
            name: m.name.into(),
            description: m.description.into(),
            unit: m.unit.into(),
            owners: split_list(m.owners),
            data_source: m.data_source.into(),
            review_cadence_months: Some(m.cadence),
            tags: split_list(m.tags),
        };
        crate::ops::metrics::create(store, &admin, &input).await?;
        timeline.moment_later()?;
    }
    Ok(people)
}

fn person<'p>(people: &'p [User], username: &str) -> &'p User {
    people
        .iter()
        .find(|u| u.username == username)
        .expect("every name in the stories is a demo person")
}

fn named_cuts(direction: Direction, cuts: [f64; 4]) -> BTreeMap<String, f64> {
    direction
        .cut_names()
        .into_iter()
        .map(String::from)
        .zip(cuts)
        .collect()
}

/// The first of the month about `months` after `now`, as a bare date.
fn first_of_month_ahead(now: Timestamp, months: u32) -> String {
    let date = now
        .as_datetime()
        .date_naive()
        .checked_add_months(Months::new(months))
        .and_then(|d| d.with_day(1))
        .expect("a few months ahead is a valid date");
    date.format("%Y-%m-%d").to_string()
}

/// Runs one story through the real workflow operations. Only the last step may record a
/// version, and it must record exactly the one the story expects.
async fn tell(
    store: &Store,
    timeline: &mut Timeline<'_>,
    people: &[User],
    story: &Story,
) -> OpResult<()> {
    let owner = person(people, story.owner);
    let effective_from = story
        .months_ahead
        .map(|m| first_of_month_ahead(timeline.real_now, m));
    let content = |cuts: [f64; 4], rationale: &str| ContentInput {
        direction: story.direction.as_str().into(),
        cuts: named_cuts(story.direction, cuts),
        shades: None,
        unit: None,
        effective_from: effective_from.clone(),
        rationale: rationale.into(),
    };
    timeline.on_day(story.day)?;
    let id = flow::propose(
        store,
        owner,
        story.metric,
        &content(story.cuts, story.rationale),
    )
    .await?;
    timeline.later()?;
    flow::submit(store, owner, id).await?;
    let mut recorded = None;
    let sign_off = story.signed_off_by.map(|by| Step::SignOff { by });
    for (i, step) in story.steps.iter().chain(&sign_off).enumerate() {
        if recorded.is_some() {
            return Err(scenario_error(format!(
                "{}: version {recorded:?} was recorded before step {i}",
                story.metric
            )));
        }
        timeline.later()?;
        recorded = match step {
            Step::Question {
                by,
                cut,
                question,
                answer,
            } => {
                flow::comment(store, person(people, by), id, question, Some(cut)).await?;
                timeline.later()?;
                flow::comment(store, owner, id, answer, Some(cut)).await?;
                None
            }
            Step::Comment { by, cut, body } => {
                flow::comment(store, person(people, by), id, body, *cut).await?;
                None
            }
            Step::Approve { by } => {
                review(store, person(people, by), id, Verdict::Approve, "").await?
            }
            Step::SignOff { by } => {
                let hash = latest_hash(store, id).await?;
                let demo = PEOPLE
                    .iter()
                    .find(|p| p.username == *by)
                    .expect("the signatory is a demo person");
                let by = person(people, by);
                flow::sign_off(store, by, id, &hash, &demo.password())
                    .await?
                    .version
            }
            Step::SendBack { by, reason } => {
                review(store, person(people, by), id, Verdict::SendBack, reason).await?
            }
            Step::Revise {
                cuts,
                rationale,
                note,
            } => {
                let c = content(*cuts, rationale);
                let input = RevisionInput {
                    direction: c.direction,
                    cuts: c.cuts,
                    shades: c.shades,
                    unit: c.unit,
                    effective_from: c.effective_from,
                    rationale: c.rationale,
                    note: (*note).into(),
                    base_revision_hash: Some(latest_hash(store, id).await?),
                };
                flow::revise(store, owner, id, &input).await?;
                timeline.moment_later()?;
                flow::submit(store, owner, id).await?;
                None
            }
        };
    }
    if recorded != story.version {
        return Err(scenario_error(format!(
            "{}: expected version {:?}, the workflow recorded {recorded:?}",
            story.metric, story.version
        )));
    }
    Ok(())
}

/// A review of the proposal's latest revision; returns the version it recorded, if any.
async fn review(
    store: &Store,
    by: &User,
    id: i64,
    verdict: Verdict,
    comment: &str,
) -> OpResult<Option<i64>> {
    let hash = latest_hash(store, id).await?;
    Ok(flow::review(store, by, id, verdict, &hash, comment)
        .await?
        .version)
}

/// The hash of the proposal's latest revision, which verdicts and sign-offs bind to.
async fn latest_hash(store: &Store, id: i64) -> OpResult<String> {
    Ok(flow::get(store, id, None).await?.view.latest_revision.hash)
}

/// Hashes every demo password, in parallel on the blocking pool.
async fn hash_demo_passwords() -> Vec<String> {
    let tasks: Vec<_> = PEOPLE
        .iter()
        .map(|p| tokio::spawn(hash_password(p.password())))
        .collect();
    let mut out = Vec::new();
    for t in tasks {
        out.push(t.await.expect("hashing does not panic"));
    }
    out
}

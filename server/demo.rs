//! The invented demo scenario: Quillfield Cycle Commons, a fictional city bike-share
//! cooperative. Every person, number and history here is made up.

use std::collections::BTreeMap;

use chrono::{Datelike, Months};

use crate::domain::User;
use crate::domain::metric::split_list;
use crate::domain::proposal::{ContentInput, Verdict};
use crate::domain::{Direction, Roles, Timestamp, Username};
use crate::ops::metrics::NewMetric;
use crate::ops::proposals::{self as flow, RevisionInput};
use crate::ops::users::{By, add_with_hash, hash_password};
use crate::ops::{OpError, OpResult};
use crate::store::Store;

/// A demo login: username, display name, roles, password.
pub struct DemoPerson {
    pub username: &'static str,
    pub display_name: &'static str,
    pub roles: &'static str,
}

impl DemoPerson {
    /// Demo passwords are printed at start-up; they protect nothing real.
    pub fn password(&self) -> String {
        format!("quillfield-{}", self.username)
    }
}

pub const PEOPLE: &[DemoPerson] = &[
    DemoPerson {
        username: "rosa",
        display_name: "Rosa Lindqvist",
        roles: "admin",
    },
    DemoPerson {
        username: "tomas",
        display_name: "Tomas Ferreira",
        roles: "owner",
    },
    DemoPerson {
        username: "priya",
        display_name: "Priya Ramdas",
        roles: "owner",
    },
    DemoPerson {
        username: "jun",
        display_name: "Jun Okada",
        roles: "owner",
    },
    DemoPerson {
        username: "hana",
        display_name: "Hana Brook",
        roles: "reviewer",
    },
    DemoPerson {
        username: "emil",
        display_name: "Emil Varga",
        roles: "reviewer",
    },
    DemoPerson {
        username: "odile",
        display_name: "Odile Marchetti",
        roles: "signatory",
    },
    DemoPerson {
        username: "samir",
        display_name: "Samir Haddad",
        roles: "auditor",
    },
    DemoPerson {
        username: "wren",
        display_name: "Wren Tully",
        roles: "viewer",
    },
];

struct DemoMetric {
    key: &'static str,
    name: &'static str,
    unit: &'static str,
    owners: &'static str,
    tags: &'static str,
    cadence: i64,
    data_source: &'static str,
    description: &'static str,
}

const METRICS: &[DemoMetric] = &[
    DemoMetric {
        key: "docks.peak_availability",
        name: "Peak dock availability",
        unit: "% of docks with a bike",
        owners: "tomas",
        tags: "fleet, service",
        cadence: 6,
        data_source: "Dock sensor feed, weekday peaks (07:00-09:00 and 16:00-19:00), averaged weekly.",
        description: "Share of docks holding at least one rentable bike during weekday peaks. Higher is better: an empty dock at 08:00 is a member who walks.",
    },
    DemoMetric {
        key: "repairs.turnaround",
        name: "Repair turnaround",
        unit: "hours",
        owners: "tomas",
        tags: "fleet, workshop, safety",
        cadence: 6,
        data_source: "Workshop ticket system: hours from a bike being flagged to its return to service, weekly median.",
        description: "How long a flagged bike waits before it is fixed. Lower is better. Brake and frame faults keep a bike off the street until fixed, whatever this metric says.",
    },
    DemoMetric {
        key: "fleet.rides_per_bike",
        name: "Rides per bike per day",
        unit: "rides",
        owners: "tomas",
        tags: "fleet, utilisation",
        cadence: 3,
        data_source: "Trip log divided by bikes in service, daily, averaged weekly.",
        description: "A target band: too few rides means an idle fleet, too many means bikes wear out faster than the workshop can keep up.",
    },
    DemoMetric {
        key: "members.monthly_churn",
        name: "Monthly member churn",
        unit: "%",
        owners: "priya",
        tags: "members",
        cadence: 12,
        data_source: "Membership system: cancelled or lapsed memberships in the month over members at its start.",
        description: "Share of members who leave in a month. Lower is better.",
    },
    DemoMetric {
        key: "finance.cash_runway",
        name: "Cash runway",
        unit: "months",
        owners: "jun",
        tags: "finance",
        cadence: 3,
        data_source: "Month-end cash over the trailing three-month average net outflow.",
        description: "How many months the cooperative could operate on the cash it holds. Higher is better.",
    },
];

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

/// One thing someone does to a proposal once it is in review.
enum Step {
    /// A comment, optionally on one cut point.
    Comment {
        by: &'static str,
        cut: Option<&'static str>,
        body: &'static str,
    },
    /// A reviewer's approval.
    Approve { by: &'static str },
    /// The signatory's sign-off, with her demo password.
    SignOff { by: &'static str },
    /// A reviewer returns it to the owner, the reason as the review comment.
    SendBack {
        by: &'static str,
        reason: &'static str,
    },
    /// The owner saves a new revision and submits it again.
    Revise {
        cuts: [f64; 4],
        rationale: &'static str,
        note: &'static str,
    },
}

/// One proposal in the invented history: proposed and submitted by `owner` from `day`
/// (days after the history starts), then taken through `steps`, a few days apart.
struct Story {
    metric: &'static str,
    owner: &'static str,
    day: i64,
    direction: Direction,
    /// In the direction's own order (worst to best, or low to high for a band).
    cuts: [f64; 4],
    rationale: &'static str,
    /// `Some(n)`: takes effect on the first of the month about `n` months after the demo
    /// starts (a scheduled version); `None`: on approval.
    months_ahead: Option<u32>,
    steps: &'static [Step],
    /// The version the last step records, or `None` when the proposal is left open.
    version: Option<i64>,
}

/// The history, in chronological order: every metric gets its versions in force, and three
/// proposals are left open so every inbox has something in it.
const STORIES: &[Story] = &[
    Story {
        metric: "docks.peak_availability",
        owner: "tomas",
        day: 14,
        direction: Direction::HigherIsBetter,
        cuts: [70.0, 80.0, 90.0, 95.0],
        rationale: "First agreed thresholds, set from the three pilot months of dock sensor data. At 80% a member at a typical station finds a bike four times in five; below 70% the complaints line fills up within a week. Outperform and stretch follow the best pilot month.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "hana",
                cut: Some("intervene"),
                body: "What is the evidence for putting the act-now line at 80 rather than 75? Please attach the pilot figures behind it.",
            },
            Step::Comment {
                by: "tomas",
                cut: Some("intervene"),
                body: "Pilot weeks below 80% brought 31 complaints on average, weeks above it 9. The weekly sheet is in the fleet folder.",
            },
            Step::Approve { by: "hana" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(1),
    },
    Story {
        metric: "repairs.turnaround",
        owner: "tomas",
        day: 32,
        direction: Direction::LowerIsBetter,
        cuts: [72.0, 48.0, 24.0, 12.0],
        rationale: "With one full-time mechanic a flagged bike waits about a day and a half. Two days is when the workshop must reshuffle its queue; three days off the street is a bike the members have paid for and cannot ride.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "emil",
                cut: Some("critical"),
                body: "Fine by me as a start. Brake faults stay off the street whatever this says, as the description notes.",
            },
            Step::Approve { by: "emil" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(1),
    },
    Story {
        metric: "fleet.rides_per_bike",
        owner: "tomas",
        day: 45,
        direction: Direction::TargetBand,
        cuts: [1.5, 2.5, 6.0, 8.0],
        rationale: "Below 2.5 rides a day a bike earns less than its upkeep; below 1.5 the fleet is too large for its members. Above 6 the workshop cannot keep up with wear, and above 8 bikes go back out with worn brakes.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "hana",
                cut: Some("critical_high"),
                body: "Is 8 a workshop limit or a guess? It matters, because crossing it would stop other work.",
            },
            Step::Comment {
                by: "tomas",
                cut: Some("critical_high"),
                body: "Workshop limit: at 8 rides a day brake pads last under three weeks, shorter than the inspection round.",
            },
            Step::Approve { by: "hana" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(1),
    },
    Story {
        metric: "members.monthly_churn",
        owner: "priya",
        day: 63,
        direction: Direction::LowerIsBetter,
        cuts: [6.0, 4.0, 2.5, 1.5],
        rationale: "Comparable city cooperatives we spoke to lose three to four per cent of members a month. Above 4% we call lapsed members; above 6% the board reviews prices and service.",
        months_ahead: None,
        steps: &[Step::Approve { by: "hana" }, Step::SignOff { by: "odile" }],
        version: Some(1),
    },
    Story {
        metric: "finance.cash_runway",
        owner: "jun",
        day: 75,
        direction: Direction::HigherIsBetter,
        cuts: [3.0, 6.0, 12.0, 18.0],
        rationale: "Three months of cash is what the cooperative needs to wind down in good order, so at or below it the board meets weekly. Six months is the reserve the members' assembly asked for; a year and more lets us plan fleet renewals without borrowing.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "odile",
                cut: None,
                body: "The board agreed these lines at its last meeting; I will sign once a reviewer has approved.",
            },
            Step::Approve { by: "emil" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(1),
    },
    Story {
        metric: "docks.peak_availability",
        owner: "tomas",
        day: 196,
        direction: Direction::HigherIsBetter,
        cuts: [70.0, 75.0, 88.0, 95.0],
        rationale: "The Eastbank expansion added 40 docks in residential streets that empty every morning by design. City-wide availability fell by four points without any member waiting longer. The intervene line moves to 75% until the second rebalancing van arrives.",
        months_ahead: None,
        steps: &[
            Step::SendBack {
                by: "emil",
                reason: "The expansion explains a lower intervene line, but not a lower outperform line: central stations would look better than they are. Please keep outperform at 90 or show the central-station figures.",
            },
            Step::Revise {
                cuts: [70.0, 75.0, 90.0, 95.0],
                rationale: "The Eastbank expansion added 40 docks in residential streets that empty every morning by design. City-wide availability fell by four points without any member waiting longer. The intervene line moves to 75% until the second rebalancing van arrives; outperform stays at 90% so central stations are held to the old standard.",
                note: "Outperform kept at 90 as Emil asked; the rationale says why.",
            },
            Step::Approve { by: "emil" },
        ],
        version: Some(2),
    },
    Story {
        metric: "repairs.turnaround",
        owner: "tomas",
        day: 259,
        direction: Direction::LowerIsBetter,
        cuts: [72.0, 36.0, 18.0, 10.0],
        rationale: "A second mechanic joined the workshop three months ago and the median turnaround has been 20 hours since. The act-now line tightens to 36 hours and outperform to 18; the critical line stays where the board set it.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "hana",
                cut: Some("intervene"),
                body: "Does 36 hours still hold in the holiday weeks, when one of the two mechanics is on leave?",
            },
            Step::Comment {
                by: "tomas",
                cut: Some("intervene"),
                body: "Last year, with one mechanic in the holiday weeks, the median was 34 hours. We book a temporary mechanic for the leave weeks.",
            },
            Step::Approve { by: "hana" },
        ],
        version: Some(2),
    },
    Story {
        metric: "members.monthly_churn",
        owner: "priya",
        day: 303,
        direction: Direction::LowerIsBetter,
        cuts: [6.0, 3.5, 2.0, 1.2],
        rationale: "Since annual memberships were discounted, monthly churn has settled near 2.6%. The intervene and outperform lines tighten so a return to the old levels is noticed; the critical line is unchanged.",
        months_ahead: None,
        steps: &[Step::Approve { by: "emil" }],
        version: Some(2),
    },
    Story {
        metric: "docks.peak_availability",
        owner: "tomas",
        day: 352,
        direction: Direction::HigherIsBetter,
        cuts: [72.0, 80.0, 92.0, 96.0],
        rationale: "The winter review found that the second rebalancing van, running since the autumn, kept peak availability above 82% on all but six weekdays. The cooperative can hold itself to the original 80% act-now line across the enlarged network again. The critical line rises to 72% because the autumn survey showed members give up after two empty docks in a row.",
        months_ahead: None,
        steps: &[
            Step::Comment {
                by: "emil",
                cut: Some("critical"),
                body: "Raising critical means the board drops other work sooner. Odile, this one needs your sign-off.",
            },
            Step::Approve { by: "hana" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(3),
    },
    Story {
        metric: "members.monthly_churn",
        owner: "priya",
        day: 497,
        direction: Direction::LowerIsBetter,
        cuts: [6.0, 3.0, 1.8, 1.0],
        rationale: "Churn has been below 2% for four months in a row. Tightening intervene to 3% keeps the line meaningful.",
        months_ahead: None,
        steps: &[Step::SendBack {
            by: "hana",
            reason: "Four months are not enough: lapsed memberships are only counted at the annual renewal, so the months before it always look low. Please base the change on a full year of figures.",
        }],
        version: None,
    },
    Story {
        metric: "finance.cash_runway",
        owner: "jun",
        day: 509,
        direction: Direction::HigherIsBetter,
        cuts: [4.0, 6.0, 12.0, 18.0],
        rationale: "The loan for the e-bike fleet, drawn from the new financial year, requires the cooperative to hold four months of cash at every month end. The critical line rises from three to four months so the board hears of a breach before the lender does.",
        months_ahead: Some(4),
        steps: &[
            Step::Comment {
                by: "emil",
                cut: None,
                body: "Effective from the start of the loan, not from approval: that is right, the old line applies until then.",
            },
            Step::Approve { by: "emil" },
            Step::SignOff { by: "odile" },
        ],
        version: Some(2),
    },
    Story {
        metric: "fleet.rides_per_bike",
        owner: "tomas",
        day: 522,
        direction: Direction::TargetBand,
        cuts: [1.5, 2.0, 7.0, 8.0],
        rationale: "With e-bikes in the fleet, summer weekdays run at 6 to 7 rides a bike without extra wear, and quiet winter weeks dip to 2.2 without anyone being idle for long. Widening the band stops the dashboard flagging ordinary seasons.",
        months_ahead: None,
        steps: &[Step::Comment {
            by: "emil",
            cut: Some("intervene_high"),
            body: "Before I approve: the workshop log for the busiest month shows brake pads on classic bikes wearing out at 6.5 rides a day. Can you add the wear figures for both bike types?",
        }],
        version: None,
    },
    Story {
        metric: "repairs.turnaround",
        owner: "tomas",
        day: 534,
        direction: Direction::LowerIsBetter,
        cuts: [60.0, 36.0, 18.0, 10.0],
        rationale: "Members now see repair times in the app, and the service charter promises a fixed bike within two and a half days. The critical line moves from 72 to 60 hours to match the promise.",
        months_ahead: None,
        steps: &[Step::Approve { by: "hana" }],
        version: None,
    },
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
            crate::store::observations::Mode::Replace,
            crate::ops::uploads::Format::Csv,
            csv.into_bytes().into(),
        )
        .await?;
        timeline.moment_later()?;
    }
    Ok(())
}

/// Roughly normal noise with mean 0 and standard deviation 1 (the sum of four uniforms, made
/// from a fixed linear congruential sequence), so every demo shows the same history.
struct Noise(u64);

impl Noise {
    fn uniform(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6_364_136_223_846_793_005)
            .wrapping_add(1_442_695_040_888_963_407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }

    fn next(&mut self) -> f64 {
        let sum: f64 = (0..4).map(|_| self.uniform()).sum();
        (sum - 2.0) * 3f64.sqrt()
    }
}

/// `x` rounded to a multiple of 1 / `per_unit` (10 for tenths), as the nearest f64 to the
/// decimal, so it prints short.
fn round_to(x: f64, per_unit: f64) -> f64 {
    (x * per_unit).round() / per_unit
}

/// An invented history for a demo metric as CSV (with a header row): two years of weekly
/// periods, or 16 to 36 months, all starting before `end`.
fn history_csv(key: &str, end: Timestamp) -> String {
    use std::f64::consts::TAU;
    let today = end.as_datetime().date_naive();
    // The Monday of the week before `end`, and the first of the month before.
    let last_monday =
        today - chrono::Duration::days(i64::from(today.weekday().num_days_from_monday()) + 7);
    let last_month = today
        .with_day(1)
        .and_then(|d| d.checked_sub_months(Months::new(1)))
        .expect("a valid month");
    let mut noise = Noise(
        key.bytes()
            .fold(17u64, |h, b| h.wrapping_mul(31).wrapping_add(u64::from(b))),
    );
    let weekly = |n: i64| (0..n).map(move |i| last_monday - chrono::Duration::weeks(n - 1 - i));
    let monthly = |n: u32| {
        (0..n).map(move |i| {
            last_month
                .checked_sub_months(Months::new(n - 1 - i))
                .expect("a valid month")
        })
    };
    let rows: Vec<(chrono::NaiveDate, f64)> = match key {
        // Peak dock availability, %: a summer dip when demand peaks.
        "docks.peak_availability" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let season = (TAU * (t as f64 + 10.0) / 52.0).cos();
                let v = 85.0 - 3.0 * season + 2.5 * noise.next();
                (d, round_to(v.clamp(55.0, 100.0), 10.0))
            })
            .collect(),
        // Repair turnaround, hours: longer in the holiday weeks with one mechanic.
        "repairs.turnaround" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let holiday = if (t % 52) >= 49 { 14.0 } else { 0.0 };
                let v = 28.0 + 4.0 * (TAU * t as f64 / 52.0).sin() + holiday + 4.0 * noise.next();
                (d, round_to(v.max(4.0), 2.0))
            })
            .collect(),
        // Rides per bike per day: busy summers, quiet winters.
        "fleet.rides_per_bike" => weekly(104)
            .enumerate()
            .map(|(t, d)| {
                let v = 4.3 - 2.1 * (TAU * (t as f64 + 4.0) / 52.0).cos() + 0.3 * noise.next();
                (d, round_to(v.max(0.5), 100.0))
            })
            .collect(),
        // Monthly member churn, %: lower since the annual membership discount.
        "members.monthly_churn" => monthly(36)
            .enumerate()
            .map(|(t, d)| {
                let level = if t < 14 { 3.6 } else { 2.6 };
                (d, round_to((level + 0.3 * noise.next()).max(0.3), 100.0))
            })
            .collect(),
        // Cash runway, months: slowly lengthening; recorded monthly only since the last
        // finance review, so the history is short.
        _ => monthly(16)
            .enumerate()
            .map(|(t, d)| {
                (
                    d,
                    round_to(7.0 + 0.28 * t as f64 + 0.6 * noise.next(), 10.0),
                )
            })
            .collect(),
    };
    let mut csv = String::from("period_start,value\n");
    for (d, v) in rows {
        csv.push_str(&format!(
            "{},{}\n",
            d.format("%Y-%m-%d"),
            crate::domain::number::format(v)
        ));
    }
    csv
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
            return Err(scenario(format!(
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
            return Err(scenario(format!(
                "invented time {at} is out of order or not in the past"
            )));
        }
        self.at = Some(at);
        self.store.set_clock(Some(at));
        Ok(())
    }
}

/// An error in the scenario itself (a step that did not do what the story says).
fn scenario(message: String) -> OpError {
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
    for (i, step) in story.steps.iter().enumerate() {
        if recorded.is_some() {
            return Err(scenario(format!(
                "{}: version {recorded:?} was recorded before step {i}",
                story.metric
            )));
        }
        timeline.later()?;
        recorded = match step {
            Step::Comment { by, cut, body } => {
                flow::comment(store, person(people, by), id, body, *cut).await?;
                None
            }
            Step::Approve { by } => {
                let hash = latest_hash(store, id).await?;
                let by = person(people, by);
                flow::review(store, by, id, Verdict::Approve, &hash, "")
                    .await?
                    .version
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
                let hash = latest_hash(store, id).await?;
                let by = person(people, by);
                flow::review(store, by, id, Verdict::SendBack, &hash, reason)
                    .await?
                    .version
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
        return Err(scenario(format!(
            "{}: expected version {:?}, the workflow recorded {recorded:?}",
            story.metric, story.version
        )));
    }
    Ok(())
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

//! The invented demo scenario as data: Quillfield Cycle Commons, a fictional city bike-share
//! cooperative. Its people, its metrics and the stories of their proposals. Every person,
//! number and history here is made up; `seed.rs` plays it through the real operations.

use crate::domain::Direction;

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

pub(super) struct DemoMetric {
    pub(super) key: &'static str,
    pub(super) name: &'static str,
    pub(super) unit: &'static str,
    pub(super) owners: &'static str,
    pub(super) tags: &'static str,
    pub(super) cadence: i64,
    pub(super) data_source: &'static str,
    pub(super) description: &'static str,
}

pub(super) const METRICS: &[DemoMetric] = &[
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

/// One thing someone does to a proposal once it is in review.
pub(super) enum Step {
    /// A reviewer asks about one cut point; a few days later the owner answers, on the same
    /// cut point. Both are comments.
    Question {
        by: &'static str,
        cut: &'static str,
        question: &'static str,
        answer: &'static str,
    },
    /// A comment, optionally on one cut point.
    Comment {
        by: &'static str,
        cut: Option<&'static str>,
        body: &'static str,
    },
    /// A reviewer's approval.
    Approve { by: &'static str },
    /// The signatory's sign-off, with her demo password: a story's last step when it names
    /// a signatory (`Story::signed_off_by`).
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
pub(super) struct Story {
    pub(super) metric: &'static str,
    pub(super) owner: &'static str,
    pub(super) day: i64,
    pub(super) direction: Direction,
    /// In the direction's own order (worst to best, or low to high for a band).
    pub(super) cuts: [f64; 4],
    pub(super) rationale: &'static str,
    /// `Some(n)`: takes effect on the first of the month about `n` months after the demo
    /// starts (a scheduled version); `None`: on approval.
    pub(super) months_ahead: Option<u32>,
    pub(super) steps: &'static [Step],
    /// The signatory who signs off after the steps, for a change that needs a sign-off.
    pub(super) signed_off_by: Option<&'static str>,
    /// The version the last step records, or `None` when the proposal is left open.
    pub(super) version: Option<i64>,
}

/// The history, in chronological order: every metric gets its versions in force, and three
/// proposals are left open so every inbox has something in it.
pub(super) const STORIES: &[Story] = &[
    Story {
        metric: "docks.peak_availability",
        owner: "tomas",
        day: 14,
        direction: Direction::HigherIsBetter,
        cuts: [70.0, 80.0, 90.0, 95.0],
        rationale: "First agreed thresholds, set from the three pilot months of dock sensor data. At 80% a member at a typical station finds a bike four times in five; below 70% the complaints line fills up within a week. Outperform and stretch follow the best pilot month.",
        months_ahead: None,
        steps: &[
            Step::Question {
                by: "hana",
                cut: "intervene",
                question: "What is the evidence for putting the act-now line at 80 rather than 75? Please attach the pilot figures behind it.",
                answer: "Pilot weeks below 80% brought 31 complaints on average, weeks above it 9. The weekly sheet is in the fleet folder.",
            },
            Step::Approve { by: "hana" },
        ],
        signed_off_by: Some("odile"),
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
        ],
        signed_off_by: Some("odile"),
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
            Step::Question {
                by: "hana",
                cut: "critical_high",
                question: "Is 8 a workshop limit or a guess? It matters, because crossing it would stop other work.",
                answer: "Workshop limit: at 8 rides a day brake pads last under three weeks, shorter than the inspection round.",
            },
            Step::Approve { by: "hana" },
        ],
        signed_off_by: Some("odile"),
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
        steps: &[Step::Approve { by: "hana" }],
        signed_off_by: Some("odile"),
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
        ],
        signed_off_by: Some("odile"),
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
        signed_off_by: None,
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
            Step::Question {
                by: "hana",
                cut: "intervene",
                question: "Does 36 hours still hold in the holiday weeks, when one of the two mechanics is on leave?",
                answer: "Last year, with one mechanic in the holiday weeks, the median was 34 hours. We book a temporary mechanic for the leave weeks.",
            },
            Step::Approve { by: "hana" },
        ],
        signed_off_by: None,
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
        signed_off_by: None,
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
        ],
        signed_off_by: Some("odile"),
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
        signed_off_by: None,
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
        ],
        signed_off_by: Some("odile"),
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
        signed_off_by: None,
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
        signed_off_by: None,
        version: None,
    },
];

//! The invented demo scenario: Quillfield Cycle Commons, a fictional city bike-share
//! cooperative. Every person, number and history here is made up.

use crate::domain::metric::split_list;
use crate::domain::{Roles, Username};
use crate::ops::OpResult;
use crate::ops::metrics::NewMetric;
use crate::ops::users::{By, add_with_hash, hash_password};
use crate::store::Store;
use crate::store::users::User;

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

/// Seeds an empty database with the scenario; returns the people created.
pub async fn seed(store: &Store) -> OpResult<Vec<User>> {
    let mut people = Vec::new();
    let hashes = hash_demo_passwords().await;
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
    }
    Ok(people)
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

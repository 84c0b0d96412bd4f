//! The workflow's pure rules (engine::workflow, engine::changes, engine::canonical), checked
//! without a server, plus number formatting against ECMAScript's own Number::toString.

use std::io::Write;
use std::process::{Command, Stdio};

use cutpoints::domain::number;
use cutpoints::domain::proposal::{ProposalState, ThresholdContent, Verdict};
use cutpoints::domain::thresholds::{CutSet, Direction, Shades};
use cutpoints::domain::{Roles, Timestamp};
use cutpoints::engine::canonical::{canonical_text, content_hash};
use cutpoints::engine::changes::compare;
use cutpoints::engine::workflow::{self, Actor, Decision, Refusal, StillNeeded, signoff_reasons};
use proptest::prelude::*;
use proptest::strategy::ValueTree;

use crate::helpers::missing_prerequisite;

fn roles(list: &str) -> Roles {
    Roles::parse_list(list).unwrap()
}

fn actor<'a>(name: &'a str, roles: &'a Roles, owns: bool) -> Actor<'a> {
    Actor {
        username: name,
        roles,
        owns_metric: owns,
    }
}

fn decision(state: ProposalState) -> Decision<'static> {
    Decision {
        state,
        is_author: false,
        latest_hash: "h2",
        given_hash: "h2",
        approved_latest: false,
        signed_latest: false,
    }
}

#[test]
fn every_step_checks_the_person_before_the_state() {
    use ProposalState::*;
    let viewer = roles("viewer");
    let v = actor("wren", &viewer, false);
    // The wrong person in the wrong state hears "not allowed", never "wrong state".
    for state in ProposalState::ALL {
        assert!(matches!(
            workflow::may_revise(v, state),
            Err(Refusal::NotAllowed(_))
        ));
        assert!(matches!(
            workflow::may_submit(v, state, true),
            Err(Refusal::NotAllowed(_))
        ));
        assert!(matches!(
            workflow::may_withdraw(v, false, state),
            Err(Refusal::NotAllowed(_))
        ));
        assert!(matches!(
            workflow::may_reject(v, state),
            Err(Refusal::NotAllowed(_))
        ));
        let d = decision(state);
        assert!(matches!(
            workflow::may_give_verdict(v, Verdict::Approve, &d),
            Err(Refusal::NotAllowed(_))
        ));
        assert!(matches!(
            workflow::may_sign_off(v, &d, true),
            Err(Refusal::NotAllowed(_))
        ));
    }
    // The right person in the wrong state hears "conflict".
    let owner_roles = roles("owner");
    let owner = actor("tomas", &owner_roles, true);
    for state in [Approved, Rejected, Withdrawn] {
        assert!(matches!(
            workflow::may_revise(owner, state),
            Err(Refusal::Conflict(_))
        ));
        assert!(matches!(
            workflow::may_withdraw(owner, true, state),
            Err(Refusal::Conflict(_))
        ));
    }
    assert!(matches!(
        workflow::may_submit(owner, InReview, true),
        Err(Refusal::Conflict(_))
    ));
    assert!(matches!(
        workflow::may_submit(owner, SentBack, false),
        Err(Refusal::Conflict(_))
    ));
    assert!(workflow::may_submit(owner, SentBack, true).is_ok());
    assert!(workflow::may_submit(owner, Draft, false).is_ok());
    let reviewer = roles("reviewer");
    assert!(matches!(
        workflow::may_reject(actor("hana", &reviewer, false), Draft),
        Err(Refusal::Conflict(_))
    ));
    assert!(workflow::may_reject(actor("hana", &reviewer, false), InReview).is_ok());
}

#[test]
fn the_transition_table_matches_design() {
    use ProposalState::*;
    // (state, may revise, may withdraw, decisions allowed)
    let table = [
        (Draft, true, true, false),
        (InReview, true, true, true),
        (SentBack, true, true, false),
        (Approved, false, false, false),
        (Rejected, false, false, false),
        (Withdrawn, false, false, false),
    ];
    let owner_roles = roles("owner");
    let owner = actor("tomas", &owner_roles, true);
    let reviewer_roles = roles("reviewer");
    let reviewer = actor("hana", &reviewer_roles, false);
    for (state, revise, withdraw, decide) in table {
        assert_eq!(
            workflow::may_revise(owner, state).is_ok(),
            revise,
            "{state:?}"
        );
        assert_eq!(
            workflow::may_withdraw(owner, true, state).is_ok(),
            withdraw,
            "{state:?}"
        );
        assert_eq!(
            workflow::may_give_verdict(reviewer, Verdict::Approve, &decision(state)).is_ok(),
            decide,
            "{state:?}"
        );
        assert_eq!(state.is_open(), revise, "{state:?}");
    }
}

#[test]
fn separation_of_duties_is_its_own_refusal() {
    let both = roles("reviewer,signatory");
    let who = actor("vera", &both, false);
    let mut d = decision(ProposalState::InReview);
    d.is_author = true;
    assert!(matches!(
        workflow::may_give_verdict(who, Verdict::Approve, &d),
        Err(Refusal::SeparationOfDuties(_))
    ));
    assert!(matches!(
        workflow::may_sign_off(who, &d, true),
        Err(Refusal::SeparationOfDuties(_))
    ));
    // An author may still send back their own proposal (it only returns it to the owners).
    assert!(workflow::may_give_verdict(who, Verdict::SendBack, &d).is_ok());
    let mut d = decision(ProposalState::InReview);
    d.approved_latest = true;
    assert!(matches!(
        workflow::may_sign_off(who, &d, true),
        Err(Refusal::SeparationOfDuties(_))
    ));
    let mut d = decision(ProposalState::InReview);
    d.signed_latest = true;
    assert!(matches!(
        workflow::may_give_verdict(who, Verdict::Approve, &d),
        Err(Refusal::SeparationOfDuties(_))
    ));
    // Stale hashes and repeats are conflicts.
    let mut d = decision(ProposalState::InReview);
    d.given_hash = "h1";
    assert!(matches!(
        workflow::may_give_verdict(who, Verdict::Approve, &d),
        Err(Refusal::Conflict(_))
    ));
    let mut d = decision(ProposalState::InReview);
    d.approved_latest = true;
    assert!(matches!(
        workflow::may_give_verdict(who, Verdict::Approve, &d),
        Err(Refusal::Conflict(_))
    ));
    // No sign-off where none is needed.
    assert!(matches!(
        workflow::may_sign_off(who, &decision(ProposalState::InReview), false),
        Err(Refusal::Conflict(_))
    ));
}

fn hib(c: [f64; 4]) -> CutSet {
    CutSet::new(Direction::HigherIsBetter, c).unwrap()
}

#[test]
fn the_change_list_gives_absolute_and_relative_change() {
    let changes = compare(
        Some(&hib([50.0, 80.0, 90.0, 95.0])),
        &hib([45.0, 75.0, 90.0, 95.5]),
    );
    let text: Vec<_> = changes.cuts.iter().map(|c| c.text.as_str()).collect();
    assert_eq!(
        text,
        [
            "critical 50 -> 45 (-5, -10 %)",
            // The example of the issue that asked for this list.
            "intervene 80 -> 75 (-5, -6.25 %)",
            "outperform 90 (unchanged)",
            "stretch 95 -> 95.5 (+0.5, +0.53 %)",
        ]
    );
    assert_eq!(changes.cuts[1].relative, Some(-0.0625));
    // Binary noise does not show: 0.3 - 0.1 is 0.2 here.
    let c = compare(Some(&hib([0.1, 0.2, 0.3, 0.4])), &hib([0.1, 0.2, 0.3, 0.6]));
    assert_eq!(c.cuts[3].absolute, Some(0.2));
    // Relative change is n/a when the old value is 0.
    let c = compare(
        Some(&hib([0.0, 1.0, 2.0, 3.0])),
        &hib([-1.0, 1.0, 2.0, 3.0]),
    );
    assert_eq!(c.cuts[0].relative, None);
    assert_eq!(c.cuts[0].text, "critical 0 -> -1 (-1, n/a)");
    assert_eq!(c.cuts[0].relative_text, "n/a");
    // Relative change divides by |old|: from -10 to -5 is +50 %.
    let c = compare(
        Some(&hib([-10.0, 1.0, 2.0, 3.0])),
        &hib([-5.0, 1.0, 2.0, 3.0]),
    );
    assert_eq!(c.cuts[0].relative, Some(0.5));
    // No earlier version: every cut is new.
    let first = compare(None, &hib([1.0, 2.0, 3.0, 4.0]));
    assert!(first.cuts.iter().all(|c| c.old.is_none() && c.changed));
    assert!(!first.direction_changed);
}

#[test]
fn signoff_is_needed_for_a_first_version_a_direction_change_or_a_critical_move() {
    let v1 = hib([50.0, 70.0, 80.0, 90.0]);
    assert_eq!(
        signoff_reasons(None, &compare(None, &v1)),
        ["the metric has never had an approved version"]
    );
    let moved = hib([45.0, 70.0, 80.0, 90.0]);
    assert_eq!(
        signoff_reasons(Some(&v1), &compare(Some(&v1), &moved)),
        ["critical moved 50 -> 45"]
    );
    let others = hib([50.0, 71.0, 85.0, 99.0]);
    assert!(signoff_reasons(Some(&v1), &compare(Some(&v1), &others)).is_empty());
    let lib = CutSet::new(Direction::LowerIsBetter, [90.0, 80.0, 70.0, 50.0]).unwrap();
    assert_eq!(
        signoff_reasons(Some(&v1), &compare(Some(&v1), &lib)),
        ["direction changes higher_is_better -> lower_is_better"]
    );
    let band = CutSet::new(Direction::TargetBand, [1.0, 2.0, 3.0, 4.0]).unwrap();
    let both = CutSet::new(Direction::TargetBand, [0.5, 2.0, 3.0, 4.5]).unwrap();
    assert_eq!(
        signoff_reasons(Some(&band), &compare(Some(&band), &both)),
        [
            "critical_low moved 1 -> 0.5",
            "critical_high moved 4 -> 4.5"
        ]
    );
}

#[test]
fn what_is_still_needed_is_said_in_words() {
    let reasons = vec!["critical moved 50 -> 45".to_string()];
    let n = StillNeeded::new(1, 0, reasons.clone(), false);
    assert_eq!(
        n.describe(),
        "1 more reviewer approval; signatory sign-off needed because critical moved 50 -> 45"
    );
    assert_eq!(
        StillNeeded::new(3, 1, vec![], false).describe(),
        "2 more reviewer approvals"
    );
    let met = StillNeeded::new(1, 1, reasons, true);
    assert!(met.is_met());
    assert!(!met.signoff);
    assert_eq!(met.describe(), "nothing: every requirement is met");
    assert!(StillNeeded::new(1, 5, vec![], false).is_met());
}

fn content(direction: Direction, c: [f64; 4], rationale: &str) -> ThresholdContent {
    ThresholdContent {
        cuts: CutSet::new(direction, c).unwrap(),
        shades: Shades::default(),
        unit: "rides".into(),
        effective_from: None,
        rationale: rationale.into(),
    }
}

#[test]
fn canonical_text_follows_the_fixed_order_for_every_direction() {
    let band = content(
        Direction::TargetBand,
        [1.5, 2.5, 6.0, 8.0],
        "Idle below 2.5.\n\nWorn out above 6.",
    );
    assert_eq!(
        canonical_text(&band),
        "direction: target_band\ncritical_low: 1.5\nintervene_low: 2.5\nintervene_high: 6\ncritical_high: 8\nshades: 3\nunit: rides\neffective_from: on approval\nrationale:\n  Idle below 2.5.\n  \n  Worn out above 6.\n"
    );
    let lib = content(Direction::LowerIsBetter, [1e-3, 1e-5, 1e-7, 1e-9], "tiny");
    let text = canonical_text(&lib);
    assert!(text.starts_with("direction: lower_is_better\ncritical: 0.001\nintervene: 0.00001\noutperform: 1e-7\nstretch: 1e-9\n"), "{text}");
    let mut dated = lib.clone();
    dated.effective_from = Some(Timestamp::parse("2027-01-01T09:30:00+01:00").unwrap());
    assert!(canonical_text(&dated).contains("effective_from: 2027-01-01T08:30:00.000000Z\n"));
    // The hash covers the rationale.
    let mut other = lib.clone();
    other.rationale = "tiny.".into();
    assert_ne!(
        content_hash(&canonical_text(&lib)),
        content_hash(&canonical_text(&other))
    );
    // SHA-256 of the empty string, FIPS 180-4 (a well-known test vector).
    assert_eq!(
        content_hash(""),
        "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
    );
}

/// ECMAScript's Number::toString (ECMA-262 §6.1.6.1.20), as Node.js prints it: the reference
/// for the shortest round-trip form that canonical texts and RFC 8785 use.
fn ecmascript_strings(values: &[f64]) -> Option<Vec<String>> {
    let script = "let d='';process.stdin.on('data',c=>d+=c).on('end',()=>{for(const l of d.split('\\n')){if(l)console.log(String(Number(l)))}})";
    let mut child = Command::new("node")
        .args(["-e", script])
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .spawn()
        .ok()?;
    let input: String = values.iter().map(|v| format!("{v:e}\n")).collect();
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.as_bytes())
        .unwrap();
    let out = child.wait_with_output().ok()?;
    Some(
        String::from_utf8(out.stdout)
            .unwrap()
            .lines()
            .map(str::to_string)
            .collect(),
    )
}

#[test]
fn numbers_print_as_ecmascript_prints_them() {
    let fixed = [
        75.0,
        0.1,
        1e-7,
        1e21,
        1e20,
        123456789.0,
        -0.5,
        5e-324,
        f64::MAX,
        0.000001,
        1.5e-6,
        100.0,
        -1e-7,
    ];
    let mut values: Vec<f64> = fixed.to_vec();
    let mut runner = proptest::test_runner::TestRunner::deterministic();
    for _ in 0..500 {
        values.push(any::<f64>().new_tree(&mut runner).unwrap().current());
    }
    values.retain(|v| v.is_finite());
    let Some(reference) = ecmascript_strings(&values) else {
        missing_prerequisite("node (ECMAScript reference for number formatting)");
        return;
    };
    assert_eq!(reference.len(), values.len());
    for (v, js) in values.iter().zip(&reference) {
        let ours = number::format(*v);
        // ECMAScript prints -0 as "0"; so do we.
        assert_eq!(&ours, js, "{v:e}");
        assert_eq!(
            ours.parse::<f64>().unwrap(),
            if *v == 0.0 { 0.0 } else { *v },
            "round trip"
        );
    }
    assert_eq!(number::format(75.0), "75");
    assert_eq!(number::format(0.1), "0.1");
    assert_eq!(number::format(1e-7), "1e-7");
}

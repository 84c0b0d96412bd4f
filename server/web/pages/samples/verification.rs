//! Sample data of the audit overview: a verification, its latest full check and one running.

use super::fixtures::at;
use crate::ops::audit::{FullCheck, FullCheckView, Verification};

pub fn verification(ok: bool) -> Verification {
    Verification {
        ok,
        events: Some(42),
        head_hash: Some("ab".repeat(32)),
        seq: (!ok).then_some(17),
        problem: (!ok).then(|| "event 17 does not match its hash".into()),
        line: "42 events verify; head 42:abab".into(),
        differences: Vec::new(),
        difference_count: 0,
        verified_before: 40,
        last_full_check: Some(FullCheckView {
            check: FullCheck {
                id: 3,
                requested_by: "cli".into(),
                started_at: at("2026-03-01T09:00:00Z"),
                finished_at: Some(at("2026-03-01T09:00:05Z")),
                events_total: 40,
                events_done: 40,
                result: None,
            },
            ok: Some(ok),
            line: Some("ok 40 abab".into()),
        }),
        running_full_check: Some(FullCheckView {
            check: FullCheck {
                id: 4,
                requested_by: "samir".into(),
                started_at: at("2026-03-02T09:00:00Z"),
                finished_at: None,
                events_total: 42,
                events_done: 21,
                result: None,
            },
            ok: None,
            line: None,
        }),
    }
}

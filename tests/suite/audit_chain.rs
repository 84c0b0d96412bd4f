//! The hash chain: RFC 8785 canonical encoding checked against the RFC's own examples, and
//! tampering by someone with database access caught, naming the right event.

use cutpoints::audit::{Break, Entry, Event, GENESIS_HASH, Verifier, canonical_event, chain_hash};
use cutpoints::domain::Timestamp;
use cutpoints::domain::access::Scope;
use serde_json::{Value, json};

use crate::cli::cutpoints;
use crate::helpers::{Backend, TestApp};
use crate::on_both_backends;

/// RFC 8785 §3.2.2: the sample input object...
const RFC_SAMPLE_INPUT: &str = r#"{
  "numbers": [333333333.33333329, 1E30, 4.50,
              2e-3, 0.000000000000000000000000001],
  "string": "\u20ac$\u000F\u000aA'\u0042\u0022\u005c\\\"\/",
  "literals": [null, true, false]
}"#;

/// ...and its canonical form, whose UTF-8 bytes RFC 8785 §3.2.4 lists in hex.
const RFC_SAMPLE_BYTES: &str = "7b 22 6c 69 74 65 72 61 6c 73 22 3a 5b 6e 75 6c 6c 2c 74 72 \
    75 65 2c 66 61 6c 73 65 5d 2c 22 6e 75 6d 62 65 72 73 22 3a \
    5b 33 33 33 33 33 33 33 33 33 2e 33 33 33 33 33 33 33 2c 31 \
    65 2b 33 30 2c 34 2e 35 2c 30 2e 30 30 32 2c 31 65 2d 32 37 \
    5d 2c 22 73 74 72 69 6e 67 22 3a 22 e2 82 ac 24 5c 75 30 30 \
    30 66 5c 6e 41 27 42 5c 22 5c 5c 5c 5c 5c 22 2f 22 7d";

#[test]
fn jcs_matches_the_rfc_8785_sample_of_section_3_2_2() {
    let input: Value = serde_json::from_str(RFC_SAMPLE_INPUT).unwrap();
    let expected: Vec<u8> = RFC_SAMPLE_BYTES
        .split_whitespace()
        .map(|h| u8::from_str_radix(h, 16).unwrap())
        .collect();
    let ours = serde_json_canonicalizer::to_vec(&input).unwrap();
    assert_eq!(ours, expected);
    assert_eq!(
        String::from_utf8(ours).unwrap(),
        r#"{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],"string":"€$\u000f\nA'B\"\\\\\"/"}"#
    );
}

#[test]
fn jcs_sorts_keys_as_rfc_8785_section_3_2_3_shows() {
    // RFC 8785 §3.2.3: properties sort by their UTF-16 code units.
    let input: Value = serde_json::from_str(
        r#"{
          "\u20ac": "Euro Sign",
          "\r": "Carriage Return",
          "\ufb33": "Hebrew Letter Dalet With Dagesh",
          "1": "One",
          "\ud83d\ude00": "Emoji: Grinning Face",
          "\u0080": "Control",
          "\u00f6": "Latin Small Letter O With Diaeresis"
        }"#,
    )
    .unwrap();
    let text = serde_json_canonicalizer::to_string(&input).unwrap();
    let order: Vec<&str> = [
        "Carriage Return",
        "One",
        "Control",
        "Latin Small Letter O With Diaeresis",
        "Euro Sign",
        "Emoji: Grinning Face",
        "Hebrew Letter Dalet With Dagesh",
    ]
    .to_vec();
    let positions: Vec<usize> = order.iter().map(|v| text.find(v).unwrap()).collect();
    assert!(positions.windows(2).all(|w| w[0] < w[1]), "{text}");
    assert!(
        text.starts_with(r#"{"\r":"Carriage Return","1":"One","#),
        "{text}"
    );
}

fn event(seq: i64, payload: Value) -> Event {
    Event {
        seq,
        at: Timestamp::parse("2026-03-01T09:30:00Z").unwrap(),
        actor: "rosa".into(),
        action: "metric.created".into(),
        subject: "metric:docks".into(),
        payload,
    }
}

#[test]
fn an_event_hashes_its_canonical_bytes_after_the_previous_hash() {
    let e = event(1, json!({"b": 1, "a": [0.1, 1e-7, "ü"]}));
    let bytes = String::from_utf8(canonical_event(&e)).unwrap();
    assert_eq!(
        bytes,
        r#"{"action":"metric.created","actor":"rosa","at":"2026-03-01T09:30:00.000000Z","payload":{"a":[0.1,1e-7,"ü"],"b":1},"seq":1,"subject":"metric:docks"}"#
    );
    // hex(SHA-256(prev_hash || JCS(event))), computed independently with coreutils' sha256sum.
    let input = format!("{GENESIS_HASH}{bytes}");
    let mut child = std::process::Command::new("sha256sum")
        .stdin(std::process::Stdio::piped())
        .stdout(std::process::Stdio::piped())
        .spawn()
        .expect("sha256sum (GNU coreutils)");
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(input.as_bytes())
        .unwrap();
    let out = String::from_utf8(child.wait_with_output().unwrap().stdout).unwrap();
    assert_eq!(
        chain_hash(GENESIS_HASH, &e),
        out.split_whitespace().next().unwrap()
    );
}

#[test]
fn the_verifier_names_the_first_break() {
    let mut entries = Vec::new();
    let mut prev = GENESIS_HASH.to_string();
    for seq in 1..=5 {
        let e = event(seq, json!({"n": seq}));
        let hash = chain_hash(&prev, &e);
        entries.push(Entry {
            event: e,
            prev_hash: prev.clone(),
            hash: hash.clone(),
        });
        prev = hash;
    }
    let run = |entries: &[Entry], known: Option<(i64, String)>| {
        let mut v = Verifier::new(known);
        for e in entries {
            v.push(e)?;
        }
        v.finish()
    };
    assert_eq!(run(&entries, None), Ok((5, prev.clone())));
    assert_eq!(
        run(&entries, Some((3, entries[2].hash.clone()))),
        Ok((5, prev.clone()))
    );
    let mut changed = entries.clone();
    changed[2].event.payload = json!({"n": 99});
    assert_eq!(run(&changed, None), Err(Break::Hash { seq: 3 }));
    let mut gap = entries.clone();
    gap.remove(1);
    assert_eq!(
        run(&gap, None),
        Err(Break::Sequence {
            seq: 3,
            expected: 2
        })
    );
    let mut relinked = entries.clone();
    relinked[3].prev_hash = GENESIS_HASH.into();
    assert_eq!(run(&relinked, None), Err(Break::Link { seq: 4 }));
    assert_eq!(
        run(&entries[..3], Some((5, prev.clone()))),
        Err(Break::KnownHead { seq: 5 })
    );
    assert_eq!(
        run(&entries, Some((4, "0".repeat(64)))),
        Err(Break::KnownHead { seq: 4 })
    );
}

/// An app with about a dozen events of different kinds.
async fn with_history(backend: Backend) -> Option<TestApp> {
    let app = TestApp::spawn(backend).await?;
    app.add_user("rosa", "admin").await;
    app.add_user("tomas", "owner").await;
    let token = app.token("rosa", Scope::Write).await;
    for i in 0..6 {
        let r = app
            .http
            .post(app.url("/api/v1/metrics"))
            .bearer_auth(&token)
            .json(&json!({"key": format!("m{i}"), "name": format!("Metric {i}"), "owners": ["tomas"], "description": "ü ∑ \"quoted\"\nline"}))
            .send()
            .await
            .unwrap();
        assert_eq!(r.status(), 201);
    }
    Some(app)
}

async fn exec(app: &TestApp, sql: &str) {
    app.exec(sql).await;
}

/// What an attacker with database access does first.
async fn drop_triggers(app: &TestApp) {
    app.drop_change_guards(&["events"]).await;
}

async fn entry(app: &TestApp, seq: i64) -> Entry {
    app.events()
        .await
        .into_iter()
        .find(|e| e.event.seq == seq)
        .unwrap()
}

/// Runs `cutpoints audit verify` and returns (exit code, stdout, stderr).
fn verify_cli(app: &TestApp, known: Option<&str>) -> (i32, String, String) {
    let mut args = vec!["audit", "verify", "--database-url", app.store_url.as_str()];
    if let Some(k) = known {
        args.extend(["--known-head", k]);
    }
    let out = cutpoints(&args);
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stdout).to_string(),
        String::from_utf8_lossy(&out.stderr).to_string(),
    )
}

on_both_backends! {
    async fn an_untouched_record_verifies_with_its_count_and_head(app) {
        // A fresh database holds only its signing key's registration.
        let first = app.events().await;
        assert_eq!(first.len(), 1);
        let (code, out, _) = verify_cli(&app, None);
        assert_eq!((code, out), (0, format!("ok 1 {}\n", first[0].hash)));
        let app = with_history(app.backend).await.unwrap();
        let events = app.events().await;
        let head = events.last().unwrap().hash.clone();
        let (code, out, err) = verify_cli(&app, None);
        assert_eq!(code, 0, "{err}");
        assert_eq!(out, format!("ok {} {head}\n", events.len()));
        let known = format!("3:{}", events[2].hash);
        assert_eq!(verify_cli(&app, Some(&known)).0, 0);
    }

    async fn every_kind_of_tampering_is_caught_naming_the_event(app) {
        let backend = app.backend;
        drop(app);
        // (what the attacker did, the seq that must be named, the problem named)
        let mut caught = Vec::new();

        // Change a payload.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        exec(&app, r#"UPDATE events SET payload = '{"after":{"name":"Renamed"}}' WHERE seq = 5"#).await;
        caught.push(("changed payload", verify_cli(&app, None), 5, "hash does not match"));

        // Change a payload and recompute that event's hash: the next link breaks.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        let mut e = entry(&app, 5).await;
        e.event.payload = json!({"after": {"name": "Renamed"}});
        let forged = chain_hash(&e.prev_hash, &e.event);
        exec(&app, &format!(r#"UPDATE events SET payload = '{{"after":{{"name":"Renamed"}}}}', hash = '{forged}' WHERE seq = 5"#)).await;
        caught.push(("changed payload, hash recomputed", verify_cli(&app, None), 6, "link does not match"));

        // Delete a row.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        exec(&app, "DELETE FROM events WHERE seq = 4").await;
        caught.push(("deleted row", verify_cli(&app, None), 5, "sequence does not match"));

        // Swap two rows.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        exec(&app, "UPDATE events SET seq = -3 WHERE seq = 3").await;
        exec(&app, "UPDATE events SET seq = 3 WHERE seq = 6").await;
        exec(&app, "UPDATE events SET seq = 6 WHERE seq = -3").await;
        caught.push(("swapped rows", verify_cli(&app, None), 3, "link does not match"));

        // Insert a forged row in the middle, correctly hashed, shifting the rest.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        let before = entry(&app, 3).await;
        exec(&app, "UPDATE events SET seq = seq + 1000 WHERE seq >= 4").await;
        exec(&app, "UPDATE events SET seq = seq - 999 WHERE seq >= 1004").await;
        let forged = Event { seq: 4, action: "metric.edited".into(), payload: json!({"after": {"owners": ["mallory"]}}), ..before.event.clone() };
        let hash = chain_hash(&before.hash, &forged);
        exec(&app, &format!(
            "INSERT INTO events (seq, at, actor, action, subject, payload, prev_hash, hash) VALUES (4, '{}', '{}', 'metric.edited', '{}', '{{\"after\":{{\"owners\":[\"mallory\"]}}}}', '{}', '{hash}')",
            forged.at, forged.actor, forged.subject, before.hash
        )).await;
        exec(&app, "UPDATE chain_head SET seq = seq + 1 WHERE id = 1").await;
        caught.push(("inserted forged row", verify_cli(&app, None), 5, "link does not match"));

        // Cut the tail without touching the recorded head.
        let app = with_history(backend).await.unwrap();
        drop_triggers(&app).await;
        let total = app.event_count().await;
        exec(&app, &format!("DELETE FROM events WHERE seq > {}", total - 2)).await;
        caught.push(("cut tail, head left", verify_cli(&app, None), total, "the recorded head is seq"));

        // Cut the tail and forge a new head. The chain alone cannot tell; where the cut events
        // made rows, the replay names the first row no event accounts for any more.
        let app = with_history(backend).await.unwrap();
        let held = app.events().await.last().unwrap().clone();
        drop_triggers(&app).await;
        let keep = entry(&app, held.event.seq - 3).await;
        exec(&app, &format!("DELETE FROM events WHERE seq > {}", keep.event.seq)).await;
        exec(&app, &format!("UPDATE chain_head SET seq = {}, hash = '{}' WHERE id = 1", keep.event.seq, keep.hash)).await;
        let (code, out, err) = verify_cli(&app, None);
        assert_eq!((code, out.as_str()), (1, ""), "{err}");
        assert!(err.contains("metrics row (metric m3) is in the database, but no event records it"), "{err}");
        let known = format!("{}:{}", held.event.seq, held.hash);
        caught.push(("cut tail, forged head", verify_cli(&app, Some(&known)), held.event.seq, "is not in the chain"));

        // Where the cut events made no rows (failed sign-ins), only a head held earlier tells.
        let app = with_history(backend).await.unwrap();
        let browser = crate::helpers::Browser::new(&app);
        for _ in 0..3 {
            browser.sign_in("rosa", "not the password").await;
        }
        let held = app.events().await.last().unwrap().clone();
        assert_eq!(held.event.action, "signin.failed");
        drop_triggers(&app).await;
        let keep = entry(&app, held.event.seq - 3).await;
        exec(&app, &format!("DELETE FROM events WHERE seq > {}", keep.event.seq)).await;
        exec(&app, &format!("UPDATE chain_head SET seq = {}, hash = '{}' WHERE id = 1", keep.event.seq, keep.hash)).await;
        let (code, out, _) = verify_cli(&app, None);
        assert_eq!((code, out), (0, format!("ok {} {}\n", keep.event.seq, keep.hash)), "undetectable without an earlier head");
        let known = format!("{}:{}", held.event.seq, held.hash);
        caught.push(("cut tail of row-less events, forged head", verify_cli(&app, Some(&known)), held.event.seq, "is not in the chain"));

        for (what, (code, out, err), seq, problem) in caught {
            assert_eq!(code, 1, "{what}: exit 1 ({out}{err})");
            assert!(out.is_empty(), "{what}: {out}");
            assert!(err.contains(&format!("event seq {seq}:")), "{what}: names seq {seq}: {err}");
            assert!(err.contains(problem), "{what}: {err}");
        }
    }
}

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(500))]

    /// The fast encoder (stored parts, no JSON parsing) writes exactly what the RFC 8785
    /// library writes for the same event, whatever the text holds.
    #[test]
    fn the_fast_canonical_encoder_agrees_with_the_rfc_8785_library(
        // JCS writes numbers as doubles; sequence numbers stay far below 2^53.
        seq in 1i64..(1i64 << 53),
        actor in "\\PC*|[\\x00-\\x1f\"\\\\]{0,8}",
        action in "[a-z._]{1,30}",
        subject in "\\PC{0,40}",
        text in "\\PC{0,60}|[\\x00-\\x1f\\u{7f}\\u{2028}\"\\\\/]{0,12}",
        number in proptest::num::f64::NORMAL,
    ) {
        let e = Event {
            seq,
            at: Timestamp::parse("2026-03-01T09:30:00.123456Z").unwrap(),
            actor,
            action,
            subject,
            payload: json!({"text": text, "n": number, "list": [1, null, true], "nested": {"z": 1, "a": text}}),
        };
        let reference = serde_json_canonicalizer::to_vec(&e).unwrap();
        proptest::prop_assert_eq!(canonical_event(&e), reference);
    }
}

//! The published set: shape, digest (RFC 8785 + SHA-256), Ed25519 signature (RFC 8032,
//! checked with OpenSSL), caching headers and If-None-Match (RFC 9110), CSV (RFC 4180, read
//! with Python's csv), point-in-time requests, changes, keys, access and evaluate.

use std::process::Command;

use base64::Engine;
use base64::engine::general_purpose::{STANDARD, URL_SAFE_NO_PAD};
use cutpoints::domain::Timestamp;
use cutpoints::domain::access::Scope;
use cutpoints::publish::Signer;
use ed25519_dalek::Verifier as _;
use serde_json::{Value, json};
use sha2::{Digest, Sha256};

use crate::helpers::{Backend, TestApp, missing_prerequisite};
use crate::on_both_backends;
use crate::workflow_support::{METRIC, Team, hib};

#[test]
fn signing_matches_rfc_8032_test_1() {
    // RFC 8032 §7.1, TEST 1: the empty message.
    let seed: [u8; 32] =
        hex::decode("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
            .unwrap()
            .try_into()
            .unwrap();
    let signer = Signer::from_seed(seed);
    assert_eq!(
        hex::encode(URL_SAFE_NO_PAD.decode(signer.public_key()).unwrap()),
        "d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a"
    );
    assert_eq!(
        hex::encode(URL_SAFE_NO_PAD.decode(signer.sign(b"")).unwrap()),
        "e5564300c360ac729086e2cc806e828a84877f1eb8e5d974d873e065224901555fb8821590a33bacc61e39701cf9b46bd25bf5f0595bbe24655141438e7a100b"
    );
}

#[test]
fn if_none_match_follows_rfc_9110() {
    use cutpoints::web::api::published::if_none_match;
    let etag = "\"abc\"";
    assert!(if_none_match("\"abc\"", etag));
    assert!(if_none_match("W/\"abc\"", etag), "weak comparison");
    assert!(if_none_match("\"x\", W/\"abc\"", etag), "a list");
    assert!(if_none_match("\"x\",\"abc\"", etag));
    assert!(if_none_match("*", etag));
    assert!(!if_none_match("\"abcd\"", etag));
    assert!(!if_none_match("abc", etag), "an unquoted tag is not a tag");
    assert!(!if_none_match("", etag));
    assert!(
        if_none_match("\"a,b\", \"abc\"", etag),
        "commas may sit inside a tag"
    );
}

async fn reader(team: &Team) -> String {
    team.app.add_user("dash", "viewer").await;
    team.app.token("dash", Scope::Read).await
}

async fn fetch(
    team: &Team,
    token: Option<&str>,
    path: &str,
    if_none_match: Option<&str>,
) -> reqwest::Response {
    let mut req = team.app.http.get(team.app.url(path));
    if let Some(t) = token {
        req = req.bearer_auth(t);
    }
    if let Some(tag) = if_none_match {
        req = req.header("if-none-match", tag);
    }
    req.send().await.unwrap()
}

fn jcs(v: &Value) -> Vec<u8> {
    serde_json_canonicalizer::to_vec(v).unwrap()
}

/// Verifies a document's signature with OpenSSL (`pkeyutl -verify -rawin`), the outside tool.
fn openssl_verifies(message: &[u8], signature: &[u8], public_key: &[u8]) -> Option<bool> {
    Command::new("openssl").arg("version").output().ok()?;
    let dir = tempfile::tempdir().unwrap();
    // SubjectPublicKeyInfo for Ed25519 (RFC 8410): a fixed prefix and the raw key.
    let mut der = hex::decode("302a300506032b6570032100").unwrap();
    der.extend_from_slice(public_key);
    std::fs::write(dir.path().join("pub.der"), der).unwrap();
    std::fs::write(dir.path().join("msg"), message).unwrap();
    std::fs::write(dir.path().join("sig"), signature).unwrap();
    let out = Command::new("openssl")
        .current_dir(dir.path())
        .args([
            "pkeyutl", "-verify", "-pubin", "-inkey", "pub.der", "-keyform", "DER", "-rawin",
            "-in", "msg", "-sigfile", "sig",
        ])
        .output()
        .unwrap();
    Some(
        out.status.success()
            && String::from_utf8_lossy(&out.stdout).contains("Signature Verified Successfully"),
    )
}

on_both_backends! {
    async fn the_set_has_the_design_shape_and_its_digest_and_signature_verify(app) {
        let team = Team::new(app).await;
        let mut body = hib(50.0, 70.0, 80.0, 90.0, "First line of the rationale.\nSecond line stays out.");
        body["shades"] = json!(4);
        team.agree(body).await;
        let (status, _) = team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "no.version", "name": "Waiting"}))).await;
        assert_eq!(status, 201);
        let token = reader(&team).await;
        let r = fetch(&team, Some(&token), "/api/v1/published", None).await;
        assert_eq!(r.status(), 200);
        let headers = r.headers().clone();
        let body = r.bytes().await.unwrap();
        let doc: Value = serde_json::from_slice(&body).unwrap();
        let meta = &doc["meta"];
        assert_eq!(meta["set_revision"], 1);
        assert_eq!(meta["schema"], "urn:cutpoints:schema:published-set:1");
        assert!(meta.get("as_of").is_none(), "as_of only when the request names one");
        assert_eq!(meta["metrics_without_version"], json!([]), "no.version came after this revision took effect");
        let entry = &doc["set"][METRIC];
        assert_eq!(entry["name"], "Peak dock availability");
        assert_eq!(entry["direction"], "higher_is_better");
        // The body is RFC 8785 JSON, where 50.0 is written 50.
        assert_eq!(entry["cuts"], json!({"critical": 50, "intervene": 70, "outperform": 80, "stretch": 90}));
        assert_eq!(entry["shades"], 4);
        assert_eq!(entry["version"], 1);
        assert_eq!(entry["approvers"], json!(["hana (display)"]));
        assert_eq!(entry["signatory"], "odile (display)");
        assert_eq!(entry["rationale"], "First line of the rationale.");
        assert_eq!(meta["in_force_since"], entry["approved_at"]);
        // The body is the RFC 8785 form of the document.
        assert_eq!(body.to_vec(), jcs(&doc));
        // digest = sha-256: + hex SHA-256 of JCS(set).
        let digest = format!("sha-256:{}", hex::encode(Sha256::digest(jcs(&doc["set"]))));
        assert_eq!(meta["digest"], digest);
        assert_eq!(headers["cutpoints-set-digest"], digest.as_str());
        assert_eq!(headers["cutpoints-set-revision"], "1");
        // audit_head: the chain's head when the revision took effect, found in the chain.
        let events = team.app.events().await;
        let approved = events.iter().rfind(|e| e.event.action == "version.approved").unwrap();
        assert_eq!(meta["audit_head"], approved.hash);
        // The signature covers the whole document without meta.signature.
        let keys: Value = fetch(&team, Some(&token), "/api/v1/keys", None).await.json().await.unwrap();
        let key = keys["keys"].as_array().unwrap().iter().find(|k| k["key_id"] == meta["key_id"]).unwrap();
        assert_eq!(key["status"], "current");
        let public = URL_SAFE_NO_PAD.decode(key["public_key"].as_str().unwrap()).unwrap();
        let signature = URL_SAFE_NO_PAD.decode(meta["signature"].as_str().unwrap()).unwrap();
        let mut unsigned = doc.clone();
        unsigned["meta"].as_object_mut().unwrap().remove("signature");
        let message = jcs(&unsigned);
        let vk = ed25519_dalek::VerifyingKey::from_bytes(&public.clone().try_into().unwrap()).unwrap();
        vk.verify(&message, &ed25519_dalek::Signature::from_slice(&signature).unwrap()).unwrap();
        match openssl_verifies(&message, &signature, &public) {
            Some(ok) => assert!(ok, "OpenSSL verifies the signature"),
            None => missing_prerequisite("openssl (outside verifier of Ed25519 signatures)"),
        }
        // A changed document does not verify.
        let mut forged = unsigned.clone();
        forged["set"][METRIC]["cuts"]["critical"] = json!(40.0);
        assert_eq!(openssl_verifies(&jcs(&forged), &signature, &public), Some(false));
    }

    async fn repeated_requests_get_identical_bytes_and_304s_follow_rfc_9110(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let token = reader(&team).await;
        let first = fetch(&team, Some(&token), "/api/v1/published", None).await;
        let h = first.headers().clone();
        let a = first.bytes().await.unwrap();
        let b = fetch(&team, Some(&token), "/api/v1/published", None).await.bytes().await.unwrap();
        assert_eq!(a, b);
        let sum = Sha256::digest(&a);
        let etag = format!("\"{}\"", hex::encode(sum));
        assert_eq!(h["etag"], etag.as_str());
        // RFC 9530 Content-Digest: the SHA-256 of the body as a structured-field byte sequence.
        assert_eq!(h["content-digest"], format!("sha-256=:{}:", STANDARD.encode(sum)).as_str());
        assert_eq!(h["cache-control"], "no-cache");
        assert_eq!(h["content-type"], "application/json");
        for tag in [etag.clone(), format!("W/{etag}"), format!("\"nope\", {etag}"), "*".to_string()] {
            let r = fetch(&team, Some(&token), "/api/v1/published", Some(&tag)).await;
            assert_eq!(r.status(), 304, "{tag}");
            assert_eq!(r.headers()["etag"], etag.as_str());
            assert!(r.bytes().await.unwrap().is_empty());
        }
        let r = fetch(&team, Some(&token), "/api/v1/published", Some("\"stale\"")).await;
        assert_eq!(r.status(), 200);
        // A new version changes the bytes and the tag.
        team.agree(hib(1.0, 2.5, 3.0, 4.0, "v2")).await;
        let mut changed = false;
        for _ in 0..40 {
            let r = fetch(&team, Some(&token), "/api/v1/published", Some(&etag)).await;
            if r.status() == 200 {
                let doc: Value = r.json().await.unwrap();
                assert_eq!(doc["meta"]["set_revision"], 2);
                changed = true;
                break;
            }
            tokio::time::sleep(std::time::Duration::from_millis(50)).await;
        }
        assert!(changed, "the new revision is served once the cache's freshness has passed");
    }

    async fn point_in_time_requests_answer_the_set_as_it_was(app) {
        let team = Team::new(app).await;
        let day = |d: i64| Timestamp::parse("2030-01-01").unwrap().plus_seconds(d * 86_400);
        team.app.store.set_clock(Some(day(10)));
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        team.app.store.set_clock(Some(day(20)));
        let mut body = hib(1.0, 2.5, 3.0, 4.0, "v2 from day 30");
        body["effective_from"] = json!(day(30).to_string());
        team.agree(body).await;
        team.app.store.set_clock(Some(day(40)));
        let token = reader(&team).await;
        let at = |q: String| {
            let team = &team;
            let token = token.clone();
            async move {
                let r = fetch(team, Some(&token), &format!("/api/v1/published?{q}"), None).await;
                (r.status().as_u16(), r.json::<Value>().await.unwrap())
            }
        };
        let (status, before) = at(format!("as_of={}", day(5))).await;
        assert_eq!(status, 200, "a time before the first version is an empty set, not an error");
        assert_eq!(before["set"], json!({}));
        assert_eq!(before["meta"]["set_revision"], 0);
        assert_eq!(before["meta"]["as_of"], day(5).to_string());
        let (_, mid) = at(format!("as_of={}", day(25))).await;
        assert_eq!(mid["meta"]["set_revision"], 1);
        assert_eq!(mid["set"][METRIC]["version"], 1);
        let (_, later) = at(format!("as_of={}", day(35))).await;
        assert_eq!(later["set"][METRIC]["version"], 2);
        assert_eq!(later["meta"]["in_force_since"], day(30).to_string());
        // What the register had recorded by day 15 about day 35: only version 1.
        let (_, known) = at(format!("as_of={}&known_at={}", day(35), day(15))).await;
        assert_eq!(known["set"][METRIC]["version"], 1);
        assert_eq!(known["meta"]["known_at"], day(15).to_string());
        // A `+` that arrived as a space is accepted; a malformed time is 400.
        let (status, _) = at("as_of=2030-02-01T00:00:00%2B00:00".into()).await;
        assert_eq!(status, 200);
        let (status, _) = at("as_of=2030-02-01T00:00:00 00:00".replace(' ', "%20")).await;
        assert_eq!(status, 200);
        let (status, err) = at("as_of=last+week".into()).await;
        assert_eq!(status, 400, "{err}");
        assert_eq!(err["error"]["code"], "bad_request");
        // The default set is the one in force now (version 2 since day 30).
        let (_, now) = at(String::new()).await;
        assert_eq!(now["set"][METRIC]["version"], 2);
        assert_eq!(now["meta"]["set_revision"], 2);
        team.app.store.set_clock(None);
    }

    async fn the_csv_is_rfc_4180_with_revision_and_digest_in_headers(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.5, "v1")).await;
        let (status, _) = team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "fleet.rides", "name": "Rides, per bike \"per day\"", "owners": ["tomas"], "unit": "rides"}))).await;
        assert_eq!(status, 201);
        let (_, p) = team.call("tomas", "POST", "/api/v1/metrics/fleet.rides/proposals", Some(json!({"direction": "target_band", "cuts": {"critical_low": 1.5, "intervene_low": 2.5, "intervene_high": 6, "critical_high": 8}, "rationale": "band"}))).await;
        let id = p["id"].as_i64().unwrap();
        team.act("tomas", id, "submit", None).await;
        team.sign("odile", id).await;
        team.approve("hana", id).await;
        let token = reader(&team).await;
        let r = fetch(&team, Some(&token), "/api/v1/published.csv", None).await;
        assert_eq!(r.status(), 200);
        let h = r.headers().clone();
        let csv = r.text().await.unwrap();
        let json: Value = fetch(&team, Some(&token), "/api/v1/published", None).await.json().await.unwrap();
        assert_eq!(h["cutpoints-set-revision"], "2");
        assert_eq!(h["cutpoints-set-digest"], json["meta"]["digest"].as_str().unwrap());
        assert!(h["content-type"].to_str().unwrap().starts_with("text/csv"));
        assert!(csv.ends_with("\r\n") && !csv.replace("\r\n", "").contains('\r'));
        let Some(python) = Command::new("python3").arg("--version").output().ok().map(|_| "python3") else {
            missing_prerequisite("python3 (its csv module is the reference CSV reader)");
            return;
        };
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("set.csv");
        std::fs::write(&path, &csv).unwrap();
        let out = Command::new(python)
            .args(["-c", "import csv, json, sys\nwith open(sys.argv[1], newline='', encoding='utf-8') as f:\n    print(json.dumps(list(csv.reader(f))))", path.to_str().unwrap()])
            .output()
            .unwrap();
        let rows: Vec<Vec<String>> = serde_json::from_slice(&out.stdout).unwrap();
        assert_eq!(rows[0], ["key", "name", "unit", "direction", "critical", "intervene", "outperform", "stretch", "critical_low", "intervene_low", "intervene_high", "critical_high", "shades", "version", "effective_from", "approved_at"]);
        assert_eq!(rows.len(), 3);
        let band = rows.iter().find(|r| r[0] == "fleet.rides").unwrap();
        assert_eq!(band[1], "Rides, per bike \"per day\"", "commas and quotes survive quoting");
        assert_eq!(&band[4..12], ["", "", "", "", "1.5", "2.5", "6", "8"]);
        let hib_row = rows.iter().find(|r| r[0] == METRIC).unwrap();
        assert_eq!(&hib_row[4..12], ["50", "70", "80", "90.5", "", "", "", ""]);
        assert_eq!(hib_row[13], "1");
    }

    async fn one_metric_changes_between_revisions_and_the_export_command(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        team.agree(hib(45.0, 70.0, 80.0, 90.0, "v2")).await;
        let token = reader(&team).await;
        let r = fetch(&team, Some(&token), &format!("/api/v1/published/{METRIC}"), None).await;
        assert_eq!(r.status(), 200);
        let one: Value = r.json().await.unwrap();
        assert_eq!(one["set"].as_object().unwrap().len(), 1);
        assert_eq!(one["set"][METRIC]["version"], 2);
        assert_eq!(one["meta"]["digest"], format!("sha-256:{}", hex::encode(Sha256::digest(jcs(&one["set"])))));
        assert_eq!(fetch(&team, Some(&token), "/api/v1/published/no.such", None).await.status(), 404);
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "waiting", "name": "W"}))).await;
        assert_eq!(fetch(&team, Some(&token), "/api/v1/published/waiting", None).await.status(), 404);
        assert_eq!(fetch(&team, Some(&token), "/api/v1/published/Bad%20Key", None).await.status(), 400);

        let changes: Value = fetch(&team, Some(&token), "/api/v1/published/changes?from=1&to=2", None).await.json().await.unwrap();
        assert_eq!(changes["changes"].as_array().unwrap().len(), 1);
        let c = &changes["changes"][0];
        assert_eq!(c["change"], "changed");
        assert_eq!(c["old"]["cuts"]["critical"], 50.0);
        assert_eq!(c["new"]["cuts"]["critical"], 45.0);
        let added: Value = fetch(&team, Some(&token), "/api/v1/published/changes?from=0&to=2", None).await.json().await.unwrap();
        assert_eq!(added["changes"][0]["change"], "added");
        for bad in ["from=2&to=1", "from=0&to=9", "from=0", "from=x&to=1"] {
            assert_eq!(fetch(&team, Some(&token), &format!("/api/v1/published/changes?{bad}"), None).await.status(), 400, "{bad}");
        }

        // `cutpoints export` prints the same bytes as the endpoint for the same request.
        let http = fetch(&team, Some(&token), "/api/v1/published", None).await.bytes().await.unwrap();
        let key = team.app.key_file.to_str().unwrap().to_string();
        let out = crate::cli::cutpoints(&["export", "--database-url", &team.app.store_url, "--signing-key", &key]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        assert_eq!(out.stdout, http.to_vec());
        let csv_http = fetch(&team, Some(&token), "/api/v1/published.csv", None).await.bytes().await.unwrap();
        let out = crate::cli::cutpoints(&["export", "--format", "csv", "--database-url", &team.app.store_url, "--signing-key", &key]);
        assert_eq!(out.stdout, csv_http.to_vec());
        let when = Timestamp::now().plus_seconds(-1).to_string();
        let http_at = fetch(&team, Some(&token), &format!("/api/v1/published?as_of={when}"), None).await.bytes().await.unwrap();
        let out = crate::cli::cutpoints(&["export", "--as-of", &when, "--database-url", &team.app.store_url, "--signing-key", &key]);
        assert_eq!(out.stdout, http_at.to_vec());
    }

    async fn reading_needs_a_token_or_session_unless_public(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        for path in ["/api/v1/published", "/api/v1/published.csv", "/api/v1/keys", &format!("/api/v1/published/{METRIC}")] {
            assert_eq!(fetch(&team, None, path, None).await.status(), 401, "{path}");
        }
        let token = reader(&team).await;
        let r = team.app.http.post(team.app.url("/api/v1/evaluate")).json(&json!({"values": []})).send().await.unwrap();
        assert_eq!(r.status(), 401);
        let r = team.app.http.post(team.app.url("/api/v1/evaluate")).bearer_auth(&token).json(&json!({"values": []})).send().await.unwrap();
        assert_eq!(r.status(), 200, "evaluate reads; a read token may call it");
        let r = team.app.http.post(team.app.url("/api/v1/metrics")).bearer_auth(&token).json(&json!({"key": "x", "name": "X"})).send().await.unwrap();
        assert_eq!(r.status(), 403, "writes never accept a read token");
        // A browser session reads too.
        let b = team.app.signed_in("wren").await;
        assert_eq!(b.get("/api/v1/published").await.status(), 200);
    }

    async fn evaluate_classifies_a_batch_with_per_item_errors(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        team.call("root", "POST", "/api/v1/metrics", Some(json!({"key": "waiting", "name": "W"}))).await;
        let token = reader(&team).await;
        let post = |body: Value| {
            let req = team.app.http.post(team.app.url("/api/v1/evaluate")).bearer_auth(token.clone()).json(&body);
            async move {
                let r = req.send().await.unwrap();
                (r.status().as_u16(), r.json::<Value>().await.unwrap())
            }
        };
        let (status, out) = post(json!({"values": [
            {"metric": METRIC, "value": 65},
            {"metric": "no.such", "value": 1},
            {"metric": METRIC, "value": null},
            {"metric": "waiting", "value": 3},
            {"metric": METRIC, "value": 95.5},
        ]})).await;
        assert_eq!(status, 200, "{out}");
        let published: Value = fetch(&team, Some(&token), "/api/v1/published", None).await.json().await.unwrap();
        assert_eq!(out["set_revision"], published["meta"]["set_revision"]);
        assert_eq!(out["digest"], published["meta"]["digest"]);
        let r = out["results"].as_array().unwrap();
        assert_eq!(r[0], json!({"metric": METRIC, "value": 65.0, "zone": "intervene", "severity": 0.25, "shade": 1, "signal": -1}));
        assert_eq!(r[1]["error"]["code"], "unknown_metric");
        assert_eq!(r[2]["zone"], "no_data");
        assert_eq!(r[3]["error"]["code"], "no_version");
        assert_eq!(r[4]["zone"], "stretch");
        // As of a time before the first version, every item is an error, none a failure.
        let (status, out) = post(json!({"values": [{"metric": METRIC, "value": 1}], "as_of": "2001-01-01"})).await;
        assert_eq!(status, 200);
        assert_eq!(out["results"][0]["error"]["code"], "no_version");
        assert_eq!(out["set_revision"], 0);
        // Too many values: 413; malformed: 400, in JSON.
        let many: Vec<Value> = (0..10_001).map(|_| json!({"metric": METRIC, "value": 1})).collect();
        let (status, out) = post(json!({"values": many})).await;
        assert_eq!(status, 413, "{out}");
        assert_eq!(out["error"]["code"], "too_large");
        let full: Vec<Value> = (0..10_000).map(|i| json!({"metric": METRIC, "value": i})).collect();
        let (status, out) = post(json!({"values": full})).await;
        assert_eq!(status, 200);
        assert_eq!(out["results"].as_array().unwrap().len(), 10_000);
        for bad in [json!({"values": [{"metric": METRIC}]}), json!({"values": "x"}), json!({"vals": []}), json!({"values": [], "as_of": "soon"})] {
            let (status, out) = post(bad.clone()).await;
            assert_eq!(status, 400, "{bad}: {out}");
        }
    }

    async fn keys_rotate_and_old_sets_stay_verifiable(app) {
        let team = Team::new(app).await;
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let token = reader(&team).await;
        let old_set: Value = fetch(&team, Some(&token), "/api/v1/published", None).await.json().await.unwrap();
        let key = team.app.key_file.to_str().unwrap().to_string();
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(&team.app.key_file).unwrap().permissions().mode();
            assert_eq!(mode & 0o777, 0o600, "the key file is readable by its owner only");
        }
        let out = crate::cli::cutpoints(&["keys", "rotate", "--database-url", &team.app.store_url, "--signing-key", &key]);
        assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
        let keys: Value = fetch(&team, Some(&token), "/api/v1/keys", None).await.json().await.unwrap();
        let list = keys["keys"].as_array().unwrap();
        assert_eq!(list.len(), 2);
        let old = list.iter().find(|k| k["key_id"] == old_set["meta"]["key_id"]).unwrap();
        assert_eq!(old["status"], "retired");
        assert!(list.iter().any(|k| k["status"] == "current" && k["key_id"] != old["key_id"]));
        // The old set still verifies with the retired key.
        let public = URL_SAFE_NO_PAD.decode(old["public_key"].as_str().unwrap()).unwrap();
        let signature = URL_SAFE_NO_PAD.decode(old_set["meta"]["signature"].as_str().unwrap()).unwrap();
        let mut unsigned = old_set.clone();
        unsigned["meta"].as_object_mut().unwrap().remove("signature");
        let vk = ed25519_dalek::VerifyingKey::from_bytes(&public.try_into().unwrap()).unwrap();
        vk.verify(&jcs(&unsigned), &ed25519_dalek::Signature::from_slice(&signature).unwrap()).unwrap();
        // An instance whose key file is not the current registered key refuses to start.
        let dir = tempfile::tempdir().unwrap();
        let stranger = dir.path().join("other.key");
        let e = cutpoints::publish::signing::load_or_create(&team.app.store, &stranger).await.unwrap_err();
        assert!(e.to_string().contains("copy that key file here"), "{e}");
        std::fs::copy(&team.app.key_file, &stranger).unwrap();
        assert!(cutpoints::publish::signing::load_or_create(&team.app.store, &stranger).await.is_ok());
        let other = TestApp::spawn(team.app.backend).await.unwrap();
        let e = cutpoints::publish::signing::load_or_create(&team.app.store, &other.key_file).await.unwrap_err();
        assert!(e.to_string().contains("refusing to start"), "{e}");
        let out = crate::cli::cutpoints(&["serve", "--database-url", &team.app.store_url, "--signing-key", other.key_file.to_str().unwrap(), "--bind", "127.0.0.1:0"]);
        assert_eq!(out.status.code(), Some(1));
        assert!(String::from_utf8_lossy(&out.stderr).contains("refusing to start"));
        let actions = team.event_actions().await;
        assert!(actions.contains(&"key.registered".to_string()) && actions.contains(&"key.rotated".to_string()));
    }

    async fn an_approval_through_one_instance_is_served_by_another(app) {
        let team = Team::new(app).await;
        let token = reader(&team).await;
        // A second instance on the same database with the same key file.
        let listener = tokio::net::TcpListener::bind("127.0.0.1:0").await.unwrap();
        let other = format!("http://{}", listener.local_addr().unwrap());
        let signer = cutpoints::publish::signing::load_or_create(&team.app.store, &team.app.key_file).await.unwrap();
        let state = cutpoints::AppState::new(cutpoints::store::Store::open(&team.app.store_url).await.unwrap(), cutpoints::WebConfig::default(), signer);
        tokio::spawn(cutpoints::serve(listener, state, std::future::pending()));
        let get_other = || {
            let req = team.app.http.get(format!("{other}/api/v1/published")).bearer_auth(token.clone());
            async move { req.send().await.unwrap().json::<Value>().await.unwrap() }
        };
        assert_eq!(get_other().await["meta"]["set_revision"], 0);
        team.agree(hib(1.0, 2.0, 3.0, 4.0, "v1")).await;
        let mut seen = 0;
        for _ in 0..60 {
            seen = get_other().await["meta"]["set_revision"].as_i64().unwrap();
            if seen == 1 {
                break;
            }
            tokio::time::sleep(std::time::Duration::from_millis(50)).await;
        }
        assert_eq!(seen, 1, "the other instance serves the new revision");
        // Both instances send the same bytes for the same revision.
        let here = fetch(&team, Some(&token), "/api/v1/published", None).await.bytes().await.unwrap();
        let there = team.app.http.get(format!("{other}/api/v1/published")).bearer_auth(&token).send().await.unwrap().bytes().await.unwrap();
        assert_eq!(here, there);
    }
}

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn public_read_opens_the_set_keys_and_evaluate_but_nothing_else() {
    let config = cutpoints::WebConfig {
        public_read: true,
        ..Default::default()
    };
    let app = TestApp::spawn_with(Backend::Sqlite, config).await.unwrap();
    for path in ["/api/v1/published", "/api/v1/published.csv", "/api/v1/keys"] {
        assert_eq!(
            app.http.get(app.url(path)).send().await.unwrap().status(),
            200,
            "{path}"
        );
    }
    let r = app
        .http
        .post(app.url("/api/v1/evaluate"))
        .json(&json!({"values": []}))
        .send()
        .await
        .unwrap();
    assert_eq!(r.status(), 200);
    assert_eq!(
        app.http
            .get(app.url("/api/v1/metrics"))
            .send()
            .await
            .unwrap()
            .status(),
        401
    );
    assert_eq!(
        app.http
            .post(app.url("/api/v1/classify"))
            .json(&json!({}))
            .send()
            .await
            .unwrap()
            .status(),
        401
    );
}

on_both_backends! {
    async fn the_published_pages_show_revision_digest_signature_and_strips(app) {
        let team = Team::new(app).await;
        team.agree(hib(50.0, 70.0, 80.0, 90.0, "v1")).await;
        team.agree(hib(45.0, 70.0, 80.0, 90.0, "v2")).await;
        let b = team.app.signed_in("wren").await;
        let (status, html) = b.get_text("/published").await;
        assert_eq!(status, 200);
        let doc: Value = b.get("/api/v1/published").await.json().await.unwrap();
        assert!(html.contains(doc["meta"]["digest"].as_str().unwrap()));
        assert!(html.contains("verified with key ed25519-"), "{html}");
        assert!(html.contains("<svg") && html.contains("critical 45, intervene 70, outperform 80, stretch 90"));
        assert!(html.contains("href=\"/api/v1/published.csv\""));
        assert!(html.contains("do not replace regulatory limits"));
        let (_, empty) = b.get_text("/published?as_of=2001-01-01").await;
        assert!(empty.contains("The set is empty at this time."));
        assert!(empty.contains("href=\"/api/v1/published?as_of=2001-01-01\""));
        let (status, changes) = b.get_text("/published/changes?from=1&to=2").await;
        assert_eq!(status, 200);
        assert!(changes.contains("changed") && changes.contains("critical 50") && changes.contains("critical 45"));
        let (_, bad) = b.get_text("/published/changes?from=2&to=1").await;
        assert!(bad.contains("choose revisions"));
    }
}

//! Every page template against its page's data: each template has a sample of the struct its
//! handler renders it from (web::pages::samples); every name the template reads, in any
//! branch, is a field of that struct or of the common part; every field is read; and the
//! sample renders. A misspelt name in a template or a struct fails here rather than on a page
//! nobody happened to open: tera looks names up only when it reaches them, and an undefined
//! name in a condition is simply false.

use std::collections::{BTreeMap, BTreeSet};

use cutpoints::web::pages::samples::{Sample, common_keys, samples};
use cutpoints::web::templates;

/// Templates that only others extend: they are checked as part of each page.
const LAYOUTS: &[&str] = &["base.html"];

#[test]
fn every_template_has_a_sample_and_every_sample_a_template() {
    let names: BTreeSet<&str> = templates::names().collect();
    let sampled: BTreeSet<&str> = samples().iter().map(|s| s.template).collect();
    let missing: Vec<&str> = names
        .iter()
        .filter(|n| !LAYOUTS.contains(n) && !sampled.contains(*n))
        .copied()
        .collect();
    assert!(
        missing.is_empty(),
        "templates without a sample in web::pages::samples: {missing:?}"
    );
    let unknown: Vec<&str> = sampled.difference(&names).copied().collect();
    assert!(unknown.is_empty(), "samples of no template: {unknown:?}");
}

#[test]
fn page_data_and_the_common_part_do_not_share_a_name() {
    let common = common_keys();
    assert!(
        common.contains("me") && common.contains("csrf"),
        "{common:?}"
    );
    for s in samples() {
        let shared: Vec<&String> = s.page_keys.intersection(&common).collect();
        assert!(
            shared.is_empty(),
            "{}: page data repeats common names {shared:?}",
            s.template
        );
    }
}

/// The names a template reads that its sample does not define, and the sample's names the
/// template never reads.
fn mismatches(s: &Sample, common: &BTreeSet<String>) -> (Vec<String>, Vec<String>) {
    let used = templates::variables(s.template).expect("the template is known");
    let undefined = used
        .iter()
        .filter(|v| !s.page_keys.contains(*v) && !common.contains(*v))
        .cloned()
        .collect();
    let unread = s
        .page_keys
        .iter()
        .filter(|k| !used.contains(*k))
        .cloned()
        .collect();
    (undefined, unread)
}

#[test]
fn every_name_a_template_reads_is_in_its_page_data_and_every_field_is_read() {
    let common = common_keys();
    let mut problems: BTreeMap<&str, String> = BTreeMap::new();
    for s in samples() {
        let (undefined, unread) = mismatches(&s, &common);
        if !undefined.is_empty() {
            problems.insert(
                s.template,
                format!("reads names its page data lacks: {undefined:?}"),
            );
        } else if !unread.is_empty() {
            problems.insert(
                s.template,
                format!("page data has fields the template never reads: {unread:?}"),
            );
        }
    }
    assert!(problems.is_empty(), "{problems:#?}");
}

#[test]
fn every_sample_renders() {
    let mut failures = Vec::new();
    for s in samples() {
        if let Err(e) = templates::render(s.template, &s.context) {
            failures.push(format!("{}: {e:?}", s.template));
        }
    }
    assert!(failures.is_empty(), "{failures:#?}");
}

#[test]
fn the_check_sees_names_in_untaken_branches_and_skips_loop_variables() {
    // The layout reads `me` and `section` only inside branches, and the metric page reads
    // `open` inside a condition; loop variables (`v` in history) are not top-level names.
    let detail = templates::variables("metric_detail.html").unwrap();
    for name in [
        "me", "section", "csrf", "title", "open", "evidence", "metric",
    ] {
        assert!(detail.contains(name), "{name} missing from {detail:?}");
    }
    assert!(!detail.contains("v"), "a loop variable counted: {detail:?}");
}

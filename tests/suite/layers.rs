//! The layering of server/ (DEVELOPERS.md): `web` and `cli` reach the register only through
//! `ops`; no layer imports one above it; and no module imports another that imports it back,
//! directly or around a circle. Checked on the source text, so a change that breaks the rule
//! fails here before anyone has to notice it in review.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

const SERVER: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/server");

/// Every .rs file under server/, with its module path (`web::pages::proposals`).
fn modules() -> BTreeMap<String, PathBuf> {
    fn walk(dir: &Path, out: &mut Vec<PathBuf>) {
        for e in std::fs::read_dir(dir).unwrap().flatten() {
            let p = e.path();
            if p.is_dir() {
                walk(&p, out);
            } else if p.extension().is_some_and(|x| x == "rs") {
                out.push(p);
            }
        }
    }
    let mut files = Vec::new();
    walk(Path::new(SERVER), &mut files);
    files
        .into_iter()
        .filter_map(|p| {
            let rel = p.strip_prefix(SERVER).unwrap().with_extension("");
            let mut parts: Vec<String> = rel
                .components()
                .map(|c| c.as_os_str().to_string_lossy().to_string())
                .collect();
            if matches!(parts.last().map(String::as_str), Some("mod" | "lib")) {
                parts.pop();
            }
            if parts == ["main"] {
                return None;
            }
            Some((parts.join("::"), p))
        })
        .collect()
}

/// The source without comments, so that a path named in prose does not count.
fn code(path: &Path) -> String {
    std::fs::read_to_string(path)
        .unwrap()
        .lines()
        .map(|l| match l.find("//") {
            Some(i) => &l[..i],
            None => l,
        })
        .collect::<Vec<_>>()
        .join("\n")
}

/// The modules a file names through `crate::` and `super::` paths, brace groups included
/// (`use super::{a, b::c}`), each resolved to the deepest module that exists.
fn references(module: &str, text: &str, known: &BTreeMap<String, PathBuf>) -> BTreeSet<String> {
    let here: Vec<&str> = if module.is_empty() {
        vec![]
    } else {
        module.split("::").collect()
    };
    let mut out = BTreeSet::new();
    let bytes = text.as_bytes();
    let is_ident = |b: u8| b.is_ascii_alphanumeric() || b == b'_' || b == b':';
    let starts = text
        .match_indices("crate::")
        .chain(text.match_indices("super::"))
        .map(|(i, _)| i)
        // The start of a path, not a segment inside a longer one (`super::super::x`).
        .filter(|&i| i == 0 || !is_ident(bytes[i - 1]));
    for i in starts {
        let rest = &text[i..];
        // The whole path, up to the first character that cannot continue it.
        let end = rest
            .find(|c: char| !(c.is_ascii_alphanumeric() || c == '_' || c == ':'))
            .unwrap_or(rest.len());
        let path = rest[..end].trim_end_matches(':');
        let mut parts: Vec<String> = Vec::new();
        let mut base: Vec<&str> = here.clone();
        for (n, seg) in path.split("::").enumerate() {
            match seg {
                "crate" if n == 0 => base.clear(),
                "super" => {
                    base.pop();
                }
                "self" => {}
                s => parts.push(s.to_string()),
            }
        }
        let mut prefix: Vec<String> = base.iter().map(|s| s.to_string()).collect();
        let mut targets = vec![prefix.clone()];
        for p in &parts {
            prefix.push(p.clone());
            targets.push(prefix.clone());
        }
        // A brace group right after the path names modules inside it too.
        if rest[end..].starts_with('{') {
            let close = rest[end..].find('}').map_or(rest.len(), |c| end + c);
            for item in rest[end + 1..close].split(',') {
                let first = item.trim().split("::").next().unwrap_or("").trim();
                if !first.is_empty() && first != "self" {
                    let mut t = prefix.clone();
                    t.push(first.to_string());
                    targets.push(t);
                }
            }
        }
        // The deepest existing module of each named path (a brace group may name several).
        let mut found: Vec<String> = Vec::new();
        for t in targets.into_iter().rev() {
            let name = t.join("::");
            if known.contains_key(&name) && !found.iter().any(|f| f.starts_with(&name)) {
                found.push(name);
            }
        }
        out.extend(found.into_iter().filter(|n| n != module));
    }
    out
}

fn graph() -> BTreeMap<String, BTreeSet<String>> {
    let known = modules();
    known
        .iter()
        .map(|(m, p)| (m.clone(), references(m, &code(p), &known)))
        .collect()
}

fn top(module: &str) -> &str {
    module.split("::").next().unwrap_or("")
}

#[test]
fn web_and_the_command_line_reach_the_register_only_through_ops() {
    let offending: Vec<String> = graph()
        .into_iter()
        .filter(|(m, _)| matches!(top(m), "web" | "cli"))
        .flat_map(|(m, refs)| {
            refs.into_iter()
                .filter(|r| top(r) == "store")
                .map(move |r| format!("{m} uses {r}"))
        })
        .collect();
    assert!(
        offending.is_empty(),
        "go through ops instead: {offending:#?}"
    );
}

#[test]
fn no_layer_imports_one_above_it() {
    // Each layer and the layers it may not use (DEVELOPERS.md, "Layout").
    let above: &[(&str, &[&str])] = &[
        (
            "domain",
            &[
                "engine", "audit", "auth", "charts", "store", "publish", "ops", "web", "cli",
            ],
        ),
        (
            "engine",
            &[
                "audit", "auth", "charts", "store", "publish", "ops", "web", "cli",
            ],
        ),
        (
            "charts",
            &["audit", "auth", "store", "publish", "ops", "web", "cli"],
        ),
        ("auth", &["store", "publish", "ops", "web", "cli"]),
        ("audit", &["store", "publish", "ops", "web", "cli"]),
        ("store", &["publish", "ops", "web", "cli"]),
        ("publish", &["ops", "web", "cli"]),
        ("ops", &["web", "cli"]),
        ("web", &["cli"]),
    ];
    let mut offending = Vec::new();
    for (m, refs) in graph() {
        if let Some((_, banned)) = above.iter().find(|(layer, _)| *layer == top(&m)) {
            for r in refs.iter().filter(|r| banned.contains(&top(r))) {
                offending.push(format!("{m} uses {r}"));
            }
        }
    }
    assert!(offending.is_empty(), "{offending:#?}");
}

#[test]
fn no_module_imports_another_that_imports_it_back() {
    let g = graph();
    // A module naming its own parent (`super::X`) or a child is how Rust nests modules; a
    // circle is an import between modules neither of which contains the other.
    let nested = |a: &str, b: &str| {
        a.is_empty()
            || b.is_empty()
            || a.starts_with(&format!("{b}::"))
            || b.starts_with(&format!("{a}::"))
    };
    let edges: BTreeMap<&str, Vec<&str>> = g
        .iter()
        .map(|(m, refs)| {
            (
                m.as_str(),
                refs.iter()
                    .map(String::as_str)
                    .filter(|r| !nested(m, r))
                    .collect(),
            )
        })
        .collect();
    // Depth-first search for a path back to where it started.
    fn back<'a>(
        edges: &BTreeMap<&'a str, Vec<&'a str>>,
        start: &'a str,
        at: &'a str,
        path: &mut Vec<&'a str>,
        seen: &mut BTreeSet<&'a str>,
    ) -> Option<Vec<&'a str>> {
        for &next in edges.get(at).map(Vec::as_slice).unwrap_or(&[]) {
            if next == start {
                let mut circle = path.clone();
                circle.push(start);
                return Some(circle);
            }
            if seen.insert(next) {
                path.push(next);
                if let Some(c) = back(edges, start, next, path, seen) {
                    return Some(c);
                }
                path.pop();
            }
        }
        None
    }
    let circles: Vec<String> = edges
        .keys()
        .filter_map(|&m| back(&edges, m, m, &mut vec![m], &mut BTreeSet::new()))
        .map(|c| c.join(" -> "))
        .collect();
    assert!(circles.is_empty(), "import circles: {circles:#?}");
}

#[test]
fn the_checks_see_imports_where_they_are() {
    // The checks above are only as good as the reading of paths: a known import of each kind
    // must be found.
    let g = graph();
    assert!(
        g["web::auth"].contains("ops::access"),
        "{:?}",
        g["web::auth"]
    );
    assert!(
        g["ops::proposals"].contains("store::proposals"),
        "{:?}",
        g["ops::proposals"]
    );
    assert!(
        g["store::sessions"].contains("domain::access"),
        "{:?}",
        g["store::sessions"]
    );
    assert!(
        g["web::pages::signin"].contains("web::auth"),
        "{:?}",
        g["web::pages::signin"]
    );
    assert!(
        g["charts::history::draw"].contains("charts::zones"),
        "{:?}",
        g["charts::history::draw"]
    );
}

/// Lines a file may hold before its opening comment must say why it is longer (DEVELOPERS.md:
/// "small enough to read in one sitting"; the figure is common practice, not a standard).
const LINES_TO_READ_IN_ONE_SITTING: usize = 500;

#[test]
fn every_long_file_says_why_it_is_long() {
    let mut long = Vec::new();
    for (module, path) in modules() {
        let text = std::fs::read_to_string(&path).unwrap();
        let lines = text.lines().count();
        let opening: String = text
            .lines()
            .take_while(|l| l.starts_with("//!"))
            .collect::<Vec<_>>()
            .join("\n");
        if lines > LINES_TO_READ_IN_ONE_SITTING && !opening.contains("Longer than") {
            long.push(format!("{module} ({lines} lines)"));
        }
    }
    assert!(
        long.is_empty(),
        "files over {LINES_TO_READ_IN_ONE_SITTING} lines whose opening comment does not say why (\"Longer than ... because ...\"): {long:?}"
    );
}

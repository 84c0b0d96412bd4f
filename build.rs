//! Rebuilds when a migration is added, so `sqlx::migrate!` embeds it; and tells the test
//! suite which prerequisites this machine lacks, so that the tests needing them count as
//! ignored instead of passing without testing anything (tests/suite/helpers.rs).

use std::path::Path;

fn main() {
    println!("cargo:rerun-if-changed=migrations");
    println!("cargo::rustc-check-cfg=cfg(postgres_missing)");
    println!("cargo::rustc-check-cfg=cfg(postgres_binaries_missing)");
    println!("cargo::rustc-check-cfg=cfg(chromium_missing)");
    println!("cargo:rerun-if-env-changed=CI");
    println!("cargo:rerun-if-env-changed=CUTPOINTS_TEST_POSTGRES_URL");
    // Where packages are installed: a change there may bring a prerequisite.
    for dir in ["/usr/lib/postgresql", "/usr/bin"] {
        if Path::new(dir).exists() {
            println!("cargo:rerun-if-changed={dir}");
        }
    }
    // Under CI nothing is ignored: a missing prerequisite fails its tests.
    if std::env::var("CI").is_ok_and(|v| v == "true" || v == "1") {
        return;
    }
    let postgres_named = std::env::var_os("CUTPOINTS_TEST_POSTGRES_URL").is_some();
    let postgres_installed = std::fs::read_dir("/usr/lib/postgresql")
        .map(|dirs| dirs.flatten().any(|d| d.path().join("bin/initdb").exists()))
        .unwrap_or(false);
    if !postgres_installed {
        println!("cargo:rustc-cfg=postgres_binaries_missing");
        if !postgres_named {
            println!("cargo:rustc-cfg=postgres_missing");
        }
    }
    let on_path = |name: &str| {
        std::env::var_os("PATH")
            .is_some_and(|path| std::env::split_paths(&path).any(|d| d.join(name).exists()))
    };
    if !on_path("chromium") || !on_path("chromedriver") {
        println!("cargo:rustc-cfg=chromium_missing");
    }
}

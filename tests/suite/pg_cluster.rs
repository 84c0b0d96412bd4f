//! Throwaway PostgreSQL clusters, made with the installed server binaries (`initdb`, `pg_ctl`;
//! Debian keeps them in /usr/lib/postgresql/NN/bin): the one the whole run makes its databases
//! on when no server is named (`helpers::postgres_server`), and a test's own for faults that
//! would disturb the others (stopping, starting and stalling it). `initdb` refuses to run as
//! root, so as root a cluster runs as the `postgres` system user. A cluster is removed when it
//! is dropped and, in any case, when the test process ends.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use crate::helpers::missing_prerequisite;

pub struct Cluster {
    /// Holds the data directory, the socket and the log; removed on drop.
    dir: PathBuf,
    bin: PathBuf,
    pub port: u16,
    as_postgres: bool,
}

/// The newest installed PostgreSQL's binaries.
fn server_binaries() -> Option<PathBuf> {
    let mut found: Vec<(u32, PathBuf)> = std::fs::read_dir("/usr/lib/postgresql")
        .ok()?
        .filter_map(|e| {
            let e = e.ok()?;
            let version = e.file_name().to_str()?.parse().ok()?;
            let bin = e.path().join("bin");
            bin.join("initdb").exists().then_some((version, bin))
        })
        .collect();
    found.sort();
    found.pop().map(|(_, bin)| bin)
}

fn is_root() -> bool {
    Command::new("id")
        .arg("-u")
        .output()
        .is_ok_and(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
}

fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

const PREFIX: &str = "cutpoints-pg-";

/// Stops and removes clusters left by test runs that were killed (their process is gone).
fn sweep_leftovers(bin: &Path, as_postgres: bool) {
    let Ok(entries) = std::fs::read_dir(std::env::temp_dir()) else {
        return;
    };
    for e in entries.flatten() {
        let name = e.file_name().to_string_lossy().to_string();
        let Some(pid) = name
            .strip_prefix(PREFIX)
            .and_then(|rest| rest.split('-').next())
            .and_then(|p| p.parse::<u32>().ok())
        else {
            continue;
        };
        if Path::new(&format!("/proc/{pid}")).exists() {
            continue;
        }
        let data = e.path().join("data");
        let _ = run(
            bin,
            as_postgres,
            "pg_ctl",
            &[
                "-D",
                data.to_str().unwrap(),
                "-m",
                "immediate",
                "-w",
                "stop",
            ],
        );
        let _ = std::fs::remove_dir_all(e.path());
    }
}

fn run(bin: &Path, as_postgres: bool, program: &str, args: &[&str]) -> std::io::Result<Output> {
    let exe = bin.join(program);
    let mut c = if as_postgres {
        let mut c = Command::new("runuser");
        c.args(["-u", "postgres", "--"]).arg(&exe);
        c
    } else {
        Command::new(&exe)
    };
    c.args(args).current_dir("/").output()
}

impl Cluster {
    /// A new cluster, running; `None` (reported as a skip, a failure under CI) when the
    /// server binaries are not installed.
    pub fn start() -> Option<Cluster> {
        let Some(bin) = server_binaries() else {
            missing_prerequisite("PostgreSQL's server binaries (Debian's postgresql package)");
            return None;
        };
        let as_postgres = is_root();
        sweep_leftovers(&bin, as_postgres);
        let mut suffix = [0u8; 6];
        getrandom::fill(&mut suffix).unwrap();
        let dir = std::env::temp_dir().join(format!(
            "{PREFIX}{}-{}",
            std::process::id(),
            hex::encode(suffix)
        ));
        std::fs::create_dir(&dir).unwrap();
        if as_postgres {
            let owned = Command::new("chown")
                .args(["postgres:postgres", dir.to_str().unwrap()])
                .status()
                .unwrap();
            assert!(owned.success(), "chown of {}", dir.display());
        }
        let cluster = Cluster {
            dir,
            bin,
            port: free_port(),
            as_postgres,
        };
        let data = cluster.data();
        let out = cluster.ctl(
            "initdb",
            &[
                "-D",
                &data,
                "-A",
                "trust",
                "-U",
                "postgres",
                "-E",
                "UTF8",
                "--no-sync",
            ],
        );
        assert!(
            out.status.success(),
            "initdb: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        cluster.start_again();
        cluster.watch_over();
        Some(cluster)
    }

    /// Starts a process of its own (its own session, so that stopping the test run does not
    /// stop it) that stops and removes the cluster once this test process has ended, however
    /// it ended: a cluster shared by the whole run is never dropped, and a killed run drops
    /// nothing.
    fn watch_over(&self) {
        let pg_ctl = self.bin.join("pg_ctl");
        let as_postgres = if self.as_postgres {
            "runuser -u postgres -- "
        } else {
            ""
        };
        let script = format!(
            "while kill -0 {pid} 2>/dev/null; do sleep 1; done; \
             {as_postgres}'{pg_ctl}' -D '{data}' -m immediate -w stop >/dev/null 2>&1; \
             rm -rf '{dir}'",
            pid = std::process::id(),
            pg_ctl = pg_ctl.display(),
            data = self.data(),
            dir = self.dir.display(),
        );
        // `--fork`: setsid returns at once, leaving the watchdog running on its own.
        let started = Command::new("setsid")
            .args(["--fork", "sh", "-c", &script])
            .stdin(std::process::Stdio::null())
            .stdout(std::process::Stdio::null())
            .stderr(std::process::Stdio::null())
            .status()
            .expect("setsid and sh (util-linux and dash on Debian)");
        assert!(started.success(), "the cluster's watchdog did not start");
    }

    fn data(&self) -> String {
        self.dir.join("data").to_str().unwrap().to_string()
    }

    fn ctl(&self, program: &str, args: &[&str]) -> Output {
        run(&self.bin, self.as_postgres, program, args).unwrap()
    }

    /// The cluster's own database, reached over TCP.
    pub fn url(&self) -> String {
        format!("postgres://postgres@127.0.0.1:{}/postgres", self.port)
    }

    /// Starts the server (again), waiting until it accepts connections.
    pub fn start_again(&self) {
        let options = format!(
            "-p {} -k {} -c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=300",
            self.port,
            self.dir.display()
        );
        let log = self.dir.join("log");
        let out = self.ctl(
            "pg_ctl",
            &[
                "-D",
                &self.data(),
                "-l",
                log.to_str().unwrap(),
                "-o",
                &options,
                "-w",
                "start",
            ],
        );
        assert!(
            out.status.success(),
            "pg_ctl start: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }

    /// Stops the server: `fast` (the administrator's shutdown: sessions are ended) or
    /// `immediate` (as if it crashed).
    pub fn stop(&self, mode: &str) {
        let out = self.ctl("pg_ctl", &["-D", &self.data(), "-m", mode, "-w", "stop"]);
        assert!(
            out.status.success(),
            "pg_ctl stop: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }

    /// The server's processes: the postmaster and its children.
    fn processes(&self) -> Vec<String> {
        let pid_file =
            std::fs::read_to_string(self.dir.join("data/postmaster.pid")).unwrap_or_default();
        let Some(main) = pid_file.lines().next().map(str::to_string) else {
            return Vec::new();
        };
        let mut pids = vec![main.clone()];
        for e in std::fs::read_dir("/proc").unwrap().flatten() {
            let stat = std::fs::read_to_string(e.path().join("stat")).unwrap_or_default();
            // pid (comm) state ppid ...: the fields after the last ')'.
            if let Some(rest) = stat.rsplit_once(')').map(|(_, r)| r)
                && rest.split_whitespace().nth(1) == Some(main.as_str())
            {
                pids.push(e.file_name().to_string_lossy().to_string());
            }
        }
        pids
    }

    fn signal(&self, signal: &str) {
        let pids = self.processes();
        assert!(!pids.is_empty(), "the cluster is not running");
        let status = Command::new("kill")
            .arg(signal)
            .args(&pids)
            .status()
            .unwrap();
        assert!(status.success(), "kill {signal}");
    }

    /// Stalls every process of the server (SIGSTOP): connections stay open, nothing answers.
    pub fn pause(&self) {
        self.signal("-STOP");
    }

    pub fn resume(&self) {
        self.signal("-CONT");
    }
}

impl Drop for Cluster {
    fn drop(&mut self) {
        let pids = self.processes();
        if !pids.is_empty() {
            let _ = Command::new("kill")
                .arg("-CONT")
                .args(&pids)
                .stderr(std::process::Stdio::null())
                .status();
        }
        let _ = run(
            &self.bin,
            self.as_postgres,
            "pg_ctl",
            &["-D", &self.data(), "-m", "immediate", "-w", "stop"],
        );
        let _ = std::fs::remove_dir_all(&self.dir);
    }
}

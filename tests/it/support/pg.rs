//! PostgreSQL for the store tests, two ways:
//! - [`Pg::system_or_private`]: a database of the test's own on the site's server, the one
//!   `.ci/run` starts from the system's packages and names in `REGULUS_TEST_PG_URL` (a role that
//!   may create databases); the database is created fresh and dropped afterwards, so tests on
//!   the one server never see each other's rows. Without the variable it falls back to a
//!   private server, and fails when `CI` is set (CI must use the system server).
//! - [`Pg::start_or_skip`]: a private server: `initdb` and `pg_ctl` (from the system's
//!   `postgresql` package, `/usr/lib/postgresql/*/bin`, or the PATH) make a cluster in a temp
//!   folder listening on a free loopback port, trusted local connections, no fsync. Run as root
//!   (CI), the server runs as the `postgres` user (it refuses root). Only a private server can be
//!   stopped and started by a test. When the programs are missing the test skips with a
//!   notice, or fails when `CI` is set.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

pub struct Pg {
    pub url: String,
    pub port: u16,
    server: Server,
}

enum Server {
    /// A server of the test's own.
    Private {
        dir: tempfile::TempDir,
        bin: PathBuf,
    },
    /// A database of the test's own on a shared server: dropped with the `Pg`.
    Shared { admin_url: String, database: String },
}

/// The variable that names the shared test server (set by `.ci/run`).
pub const SHARED_URL_VAR: &str = "REGULUS_TEST_PG_URL";

/// `url` with its database name replaced by `database` (the part after the last `/`, before
/// any `?`).
pub fn with_database(url: &str, database: &str) -> Option<String> {
    let (base, query) = match url.split_once('?') {
        Some((b, q)) => (b, Some(q)),
        None => (url, None),
    };
    let after_scheme = base.find("://")? + 3;
    let slash = base[after_scheme..].find('/').map(|i| i + after_scheme);
    let host_part = &base[..slash.unwrap_or(base.len())];
    let mut out = format!("{host_part}/{database}");
    if let Some(q) = query {
        out.push('?');
        out.push_str(q);
    }
    Some(out)
}

fn block_on<T>(f: impl std::future::Future<Output = T>) -> T {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .unwrap()
        .block_on(f)
}

/// Run one statement as the shared server's role; the error text on failure.
fn admin(url: &str, sql: &str) -> Result<(), String> {
    block_on(async {
        let (client, conn) = tokio_postgres::connect(url, tokio_postgres::NoTls)
            .await
            .map_err(|e| format!("connect: {e}"))?;
        tokio::spawn(conn);
        client
            .batch_execute(sql)
            .await
            .map_err(|e| format!("{sql}: {e}"))
    })
}

fn find_bin() -> Option<PathBuf> {
    let mut dirs: Vec<PathBuf> = std::fs::read_dir("/usr/lib/postgresql")
        .into_iter()
        .flatten()
        .flatten()
        .map(|e| e.path().join("bin"))
        .filter(|p| p.join("pg_ctl").is_file() && p.join("initdb").is_file())
        .collect();
    dirs.sort();
    if let Some(d) = dirs.pop() {
        return Some(d);
    }
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path).find(|d| d.join("pg_ctl").is_file() && d.join("initdb").is_file())
}

fn is_root() -> bool {
    // SAFETY: geteuid has no preconditions and touches no memory.
    unsafe { libc::geteuid() == 0 }
}

impl Pg {
    fn cmd(&self, program: &str) -> Command {
        match &self.server {
            Server::Private { bin, .. } => cmd(bin, program),
            Server::Shared { .. } => panic!("only a private test server can be stopped or started"),
        }
    }

    /// A fresh database on the shared server named by `REGULUS_TEST_PG_URL`, or a private
    /// server when the variable is unset (a failure when `CI` is set: CI starts the system's
    /// server and must test against it); `None` only when neither can run outside CI.
    pub fn system_or_private(what: &str) -> Option<Pg> {
        let Ok(admin_url) = std::env::var(SHARED_URL_VAR) else {
            if std::env::var_os("CI").is_some() {
                panic!("{SHARED_URL_VAR} is not set and CI is set: {what} must use the system's PostgreSQL server that .ci/run starts");
            }
            return Pg::start_or_skip(what);
        };
        static NEXT: std::sync::atomic::AtomicU32 = std::sync::atomic::AtomicU32::new(0);
        let database = format!(
            "regulus_t{}_{}",
            std::process::id(),
            NEXT.fetch_add(1, std::sync::atomic::Ordering::SeqCst)
        );
        let url = with_database(&admin_url, &database)
            .unwrap_or_else(|| panic!("{SHARED_URL_VAR} is not a postgresql:// URL: {admin_url}"));
        admin(&admin_url, &format!("DROP DATABASE IF EXISTS {database}"))
            .and_then(|()| admin(&admin_url, &format!("CREATE DATABASE {database}")))
            .unwrap_or_else(|e| {
                panic!("cannot create a test database on {SHARED_URL_VAR} ({admin_url}) for {what}: {e}")
            });
        let port = admin_url
            .rsplit_once(':')
            .and_then(|(_, rest)| rest.split('/').next()?.parse().ok())
            .unwrap_or(5432);
        Some(Pg {
            url,
            port,
            server: Server::Shared {
                admin_url,
                database,
            },
        })
    }

    /// Start a private server, or `None` (with a notice) when PostgreSQL is not installed.
    pub fn start_or_skip(what: &str) -> Option<Pg> {
        let Some(bin) = find_bin() else {
            if std::env::var_os("CI").is_some() {
                panic!("PostgreSQL (initdb, pg_ctl) is not installed and CI is set: {what} needs a real server");
            }
            eprintln!("NOTICE: PostgreSQL not installed; skipping {what}");
            return None;
        };
        let dir = tempfile::tempdir().expect("tempdir");
        let port = std::net::TcpListener::bind("127.0.0.1:0")
            .unwrap()
            .local_addr()
            .unwrap()
            .port();
        if is_root() {
            // The server runs as `postgres`: let it into the temp folder.
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(dir.path(), std::fs::Permissions::from_mode(0o777)).unwrap();
        }
        let pg = Pg {
            url: format!("postgresql://regulus@127.0.0.1:{port}/postgres"),
            port,
            server: Server::Private { dir, bin },
        };
        let out = pg
            .cmd("initdb")
            .args([
                "-A",
                "trust",
                "-U",
                "regulus",
                "-E",
                "UTF8",
                "--no-sync",
                "-D",
            ])
            .arg(pg.data())
            .output()
            .expect("run initdb");
        assert!(
            out.status.success(),
            "initdb failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        pg.start();
        Some(pg)
    }

    fn dir(&self) -> &Path {
        match &self.server {
            Server::Private { dir, .. } => dir.path(),
            Server::Shared { .. } => panic!("a shared test server has no folder of ours"),
        }
    }

    fn data(&self) -> PathBuf {
        self.dir().join("data")
    }

    pub fn start(&self) {
        let out = self
            .cmd("pg_ctl")
            .arg("-D")
            .arg(self.data())
            .arg("-l")
            .arg(self.dir().join("server.log"))
            .arg("-o")
            .arg(format!(
                "-p {} -k {} -c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=60",
                self.port,
                self.dir().display()
            ))
            .args(["-w", "-t", "60", "start"])
            .output()
            .expect("run pg_ctl start");
        assert!(
            out.status.success(),
            "pg_ctl start failed: {}{}",
            String::from_utf8_lossy(&out.stderr),
            std::fs::read_to_string(self.dir().join("server.log")).unwrap_or_default()
        );
    }

    /// Stop the server at once (open connections are cut).
    pub fn stop(&self) {
        let out = self
            .cmd("pg_ctl")
            .arg("-D")
            .arg(self.data())
            .args(["-m", "immediate", "-w", "stop"])
            .output()
            .expect("run pg_ctl stop");
        assert!(
            out.status.success(),
            "pg_ctl stop failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
    }

    /// Run one SQL statement through psql-free means: a tokio-postgres client.
    pub fn query_i64(&self, sql: &str) -> i64 {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .unwrap();
        rt.block_on(async {
            let (client, conn) = tokio_postgres::connect(&self.url, tokio_postgres::NoTls)
                .await
                .expect("connect to the test server");
            tokio::spawn(conn);
            client
                .query_one(sql, &[])
                .await
                .expect(sql)
                .get::<_, i64>(0)
        })
    }
}

impl Pg {
    /// The first column of every row, as numbers.
    pub fn query_f64s(&self, sql: &str) -> Vec<f64> {
        let rt = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .unwrap();
        rt.block_on(async {
            let (client, conn) = tokio_postgres::connect(&self.url, tokio_postgres::NoTls)
                .await
                .expect("connect to the test server");
            tokio::spawn(conn);
            client
                .query(sql, &[])
                .await
                .expect(sql)
                .iter()
                .map(|r| r.get::<_, f64>(0))
                .collect()
        })
    }
}

fn cmd(bin: &Path, program: &str) -> Command {
    if is_root() {
        let mut c = Command::new("runuser");
        c.args(["-u", "postgres", "--"]).arg(bin.join(program));
        c
    } else {
        Command::new(bin.join(program))
    }
}

impl Drop for Pg {
    fn drop(&mut self) {
        match &self.server {
            Server::Private { .. } => {
                let _ = self
                    .cmd("pg_ctl")
                    .arg("-D")
                    .arg(self.data())
                    .args(["-m", "immediate", "-w", "stop"])
                    .output();
            }
            Server::Shared {
                admin_url,
                database,
            } => {
                let _ = admin(
                    admin_url,
                    &format!("DROP DATABASE IF EXISTS {database} WITH (FORCE)"),
                );
            }
        }
    }
}

#[test]
fn database_name_is_replaced_in_the_url() {
    // URL form from the PostgreSQL manual, 34.1.1.2 "Connection URIs".
    assert_eq!(
        with_database("postgresql://u:p@127.0.0.1:5432/regulus_test", "t1").as_deref(),
        Some("postgresql://u:p@127.0.0.1:5432/t1")
    );
    assert_eq!(
        with_database("postgresql://u@h:1/d?sslmode=disable", "t2").as_deref(),
        Some("postgresql://u@h:1/t2?sslmode=disable")
    );
    assert_eq!(
        with_database("postgresql://u@h:1", "t3").as_deref(),
        Some("postgresql://u@h:1/t3")
    );
    assert_eq!(with_database("not a url", "t"), None);
}

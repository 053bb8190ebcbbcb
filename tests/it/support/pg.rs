//! A private PostgreSQL server for the store tests: `initdb` and `pg_ctl` (from the system's
//! `postgresql` package, `/usr/lib/postgresql/*/bin`, or the PATH) make a cluster in a temp
//! folder listening on a free loopback port, trusted local connections, no fsync. Run as root
//! (CI), the server runs as the `postgres` user (it refuses root). Tests can stop and start
//! it. When the programs are missing the test skips with a notice, or fails when `CI` is set.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

pub struct Pg {
    pub url: String,
    pub port: u16,
    dir: tempfile::TempDir,
    bin: PathBuf,
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
        cmd(&self.bin, program)
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
            dir,
            bin,
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

    fn data(&self) -> PathBuf {
        self.dir.path().join("data")
    }

    pub fn start(&self) {
        let out = self
            .cmd("pg_ctl")
            .arg("-D")
            .arg(self.data())
            .arg("-l")
            .arg(self.dir.path().join("server.log"))
            .arg("-o")
            .arg(format!(
                "-p {} -k {} -c listen_addresses=127.0.0.1 -c fsync=off -c max_connections=60",
                self.port,
                self.dir.path().display()
            ))
            .args(["-w", "-t", "60", "start"])
            .output()
            .expect("run pg_ctl start");
        assert!(
            out.status.success(),
            "pg_ctl start failed: {}{}",
            String::from_utf8_lossy(&out.stderr),
            std::fs::read_to_string(self.dir.path().join("server.log")).unwrap_or_default()
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
        let _ = self
            .cmd("pg_ctl")
            .arg("-D")
            .arg(self.data())
            .args(["-m", "immediate", "-w", "stop"])
            .output();
    }
}

//! A second, private PostgreSQL that speaks only TLS, for the TLS test: a certificate
//! authority and a server certificate made with the `openssl` command, a cluster made with
//! `initdb` in a temporary folder (as the test server's owner when run as root), and
//! `pg_hba.conf` rejecting every connection without encryption. Stopped when dropped.

use std::path::{Path, PathBuf};
use std::process::Command;

pub struct TlsServer {
    pub dir: tempfile::TempDir,
    pub port: u16,
    pg_ctl: PathBuf,
    owner: Option<(u32, u32)>,
}

/// Debian's newest PostgreSQL binaries, or TURNBOOK_TEST_PG_BIN.
fn bin_dir() -> PathBuf {
    if let Some(b) = std::env::var_os("TURNBOOK_TEST_PG_BIN") {
        return PathBuf::from(b);
    }
    let mut versions: Vec<PathBuf> = std::fs::read_dir("/usr/lib/postgresql")
        .expect("PostgreSQL under /usr/lib/postgresql (or TURNBOOK_TEST_PG_BIN)")
        .filter_map(|e| e.ok().map(|e| e.path().join("bin")))
        .collect();
    versions.sort();
    versions.pop().expect("a PostgreSQL version")
}

/// Who runs the server: the test server's owner (or `postgres`) when we are root.
fn server_owner() -> Option<(u32, u32)> {
    use std::os::unix::fs::MetadataExt;
    if unsafe { libc::geteuid() } != 0 {
        return None;
    }
    if let Some(d) = std::env::var_os("TURNBOOK_TEST_PG_DATA") {
        let m = std::fs::metadata(d).expect("TURNBOOK_TEST_PG_DATA");
        return Some((m.uid(), m.gid()));
    }
    let id = |flag: &str| -> u32 {
        let out = Command::new("id")
            .args([flag, "postgres"])
            .output()
            .unwrap();
        String::from_utf8_lossy(&out.stdout).trim().parse().unwrap()
    };
    Some((id("-u"), id("-g")))
}

fn run(cmd: &mut Command) {
    let out = cmd.output().unwrap();
    assert!(out.status.success(), "{cmd:?}: {out:?}");
}

/// A command run as `owner` when given.
fn as_owner(owner: Option<(u32, u32)>, program: &Path) -> Command {
    match owner {
        Some((uid, gid)) => {
            let mut c = Command::new("setpriv");
            c.args([
                format!("--reuid={uid}"),
                format!("--regid={gid}"),
                "--clear-groups".into(),
            ])
            .arg(program);
            c
        }
        None => Command::new(program),
    }
}

/// A certificate authority `NAME.pem` (key `NAME.key`) in `dir`.
pub fn make_ca(dir: &Path, name: &str) {
    run(Command::new("openssl")
        .current_dir(dir)
        .args([
            "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2",
        ])
        .args([
            "-keyout",
            &format!("{name}.key"),
            "-out",
            &format!("{name}.pem"),
        ])
        .args(["-subj", &format!("/CN=turnbook test {name}")]));
}

/// The server's certificate for 127.0.0.1 and localhost, signed by the authority `ca`.
fn make_server_cert(dir: &Path, ca: &str) {
    run(Command::new("openssl")
        .current_dir(dir)
        .args([
            "req",
            "-newkey",
            "rsa:2048",
            "-nodes",
            "-keyout",
            "server.key",
        ])
        .args(["-out", "server.csr", "-subj", "/CN=127.0.0.1"]));
    std::fs::write(
        dir.join("server.ext"),
        "subjectAltName = IP:127.0.0.1, DNS:localhost\nextendedKeyUsage = serverAuth\n",
    )
    .unwrap();
    run(Command::new("openssl")
        .current_dir(dir)
        .args(["x509", "-req", "-in", "server.csr", "-days", "2"])
        .args(["-CA", &format!("{ca}.pem"), "-CAkey", &format!("{ca}.key")])
        .args([
            "-CAcreateserial",
            "-out",
            "server.pem",
            "-extfile",
            "server.ext",
        ]));
}

/// A port nobody listens on now.
fn free_port() -> u16 {
    std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port()
}

impl TlsServer {
    /// Make the authority `ca`, the server's certificate and the cluster, and start it.
    pub fn start() -> TlsServer {
        use std::os::unix::fs::PermissionsExt;
        let dir = tempfile::tempdir().unwrap();
        let owner = server_owner();
        make_ca(dir.path(), "ca");
        make_server_cert(dir.path(), "ca");
        let bin = bin_dir();
        let data = dir.path().join("data");
        std::fs::set_permissions(
            dir.path().join("server.key"),
            std::fs::Permissions::from_mode(0o600),
        )
        .unwrap();
        if let Some((uid, gid)) = owner {
            for f in ["", "server.key", "server.pem"] {
                std::os::unix::fs::chown(dir.path().join(f), Some(uid), Some(gid)).unwrap();
            }
        }
        run(as_owner(owner, &bin.join("initdb"))
            .arg("-D")
            .arg(&data)
            .args(["-A", "trust", "-U", "postgres", "--no-sync"]));
        let port = free_port();
        let conf = format!(
            "port = {port}\nlisten_addresses = '127.0.0.1'\nunix_socket_directories = '{}'\n\
             fsync = off\nssl = on\nssl_cert_file = '{}'\nssl_key_file = '{}'\n",
            dir.path().display(),
            dir.path().join("server.pem").display(),
            dir.path().join("server.key").display(),
        );
        let mut text = std::fs::read_to_string(data.join("postgresql.conf")).unwrap();
        text.push_str(&conf);
        std::fs::write(data.join("postgresql.conf"), text).unwrap();
        std::fs::write(
            data.join("pg_hba.conf"),
            "local all all trust\nhostssl all all 127.0.0.1/32 trust\n\
             hostnossl all all 127.0.0.1/32 reject\n",
        )
        .unwrap();
        let server = TlsServer {
            pg_ctl: bin.join("pg_ctl"),
            port,
            owner,
            dir,
        };
        run(as_owner(owner, &server.pg_ctl)
            .arg("-D")
            .arg(&data)
            .arg("-l")
            .arg(server.dir.path().join("log"))
            .args(["-w", "-t", "60", "start"]));
        server
    }

    /// The CA file clients check the server's certificate against.
    pub fn ca_file(&self) -> PathBuf {
        self.dir.path().join("ca.pem")
    }
}

impl Drop for TlsServer {
    fn drop(&mut self) {
        let _ = as_owner(self.owner, &self.pg_ctl)
            .arg("-D")
            .arg(self.dir.path().join("data"))
            .args(["-m", "immediate", "stop"])
            .output();
    }
}

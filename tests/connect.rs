//! Connecting the way libpq does, checked against real servers: the suite's
//! throwaway PostGIS (TLS with a self-signed certificate), one started without
//! TLS, and one serving a certificate signed by a CA this test makes, with
//! client-certificate and password logins. Certificates are made with the
//! `openssl` command in the test's temporary directory. Where two programs can
//! be compared, psql (libpq itself) is the reference.
//!
//! Run with a throwaway server: `GEOFOLD_TEST_DB=… cargo test --test connect`
//! (`bash scripts/test.sh` sets it); the extra servers start and stop here.

mod common;

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use common::{code, db_uri, psql_at, run, Cluster, Workdir};
use geofold::adapters::postgis::{ConnectOptions, Session};
use geofold::error::{exit, Error};

/// Options with exactly these environment variables (plus `HOME`), and no retries.
fn options(env: &[(&str, &str)], home: &Path) -> ConnectOptions {
    let mut environment: BTreeMap<String, String> = env
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_string()))
        .collect();
    environment
        .entry("HOME".into())
        .or_insert_with(|| home.display().to_string());
    ConnectOptions {
        retry_for: Duration::ZERO,
        environment: Some(environment),
    }
}

fn connect(db: &str, env: &[(&str, &str)], home: &Path) -> Result<Session, Error> {
    Session::connect_with(Some(db), &options(env, home))
}

fn refused(result: Result<Session, Error>, what: &str) -> Error {
    match result {
        Ok(session) => panic!(
            "{what}: connected to {}, but must be refused",
            session.description
        ),
        Err(error) => error,
    }
}

fn connected(result: Result<Session, Error>, what: &str) -> Session {
    result.unwrap_or_else(|e| panic!("{what}: {e}"))
}

/// Whether the server holds the backend of `application_name` as encrypted
/// (pg_stat_ssl joined to pg_stat_activity; PostgreSQL docs "The Cumulative
/// Statistics System", views pg_stat_ssl and pg_stat_activity).
fn encrypted(uri: &str, application_name: &str) -> bool {
    let answer = psql_at(
        uri,
        &format!(
            "SELECT s.ssl FROM pg_stat_ssl s JOIN pg_stat_activity a USING (pid) \
             WHERE a.application_name = '{application_name}'"
        ),
    );
    match answer.as_str() {
        "t" => true,
        "f" => false,
        other => panic!("no single backend named {application_name}: {other:?}"),
    }
}

fn port_of(uri: &str) -> u16 {
    uri.rsplit_once(':')
        .and_then(|(_, rest)| rest.split('/').next())
        .and_then(|p| p.parse().ok())
        .expect("a port in the URI")
}

/// A port on 127.0.0.1 that nobody listens on right now.
fn dead_port() -> u16 {
    let listener = std::net::TcpListener::bind("127.0.0.1:0").expect("bind");
    listener.local_addr().expect("address").port()
}

fn query(session: &Session, sql: &str) -> Vec<String> {
    let row = session
        .runtime
        .block_on(session.client.query_one(sql, &[]))
        .expect("query");
    (0..row.len())
        .map(|i| row.try_get::<_, String>(i).expect("text column"))
        .collect()
}

/// Certificates made with `openssl` for these tests: two CAs, a server
/// certificate for localhost / 127.0.0.1 signed by the first, client
/// certificates for `certuser` from each CA, and revocation lists.
struct Pki {
    dir: tempfile::TempDir,
}

const PKI_CONFIG: &str = "\
[req]
distinguished_name = dn
prompt = no
[dn]
CN = placeholder
[ca_ext]
basicConstraints = critical, CA:TRUE
keyUsage = critical, keyCertSign, cRLSign
subjectKeyIdentifier = hash
[server_ext]
basicConstraints = CA:FALSE
keyUsage = critical, digitalSignature, keyEncipherment
extendedKeyUsage = serverAuth
subjectAltName = DNS:localhost, IP:127.0.0.1
authorityKeyIdentifier = keyid
[client_ext]
basicConstraints = CA:FALSE
keyUsage = critical, digitalSignature
extendedKeyUsage = clientAuth
authorityKeyIdentifier = keyid
[ca]
default_ca = test_ca
[test_ca]
database = index.txt
crlnumber = crlnumber
default_md = sha256
default_crl_days = 2
";

impl Pki {
    fn new() -> Pki {
        let pki = Pki {
            dir: tempfile::tempdir().expect("pki dir"),
        };
        std::fs::write(pki.path("pki.cnf"), PKI_CONFIG).unwrap();
        std::fs::write(pki.path("index.txt"), "").unwrap();
        std::fs::write(pki.path("crlnumber"), "01\n").unwrap();
        let ec = "-newkey ec -pkeyopt ec_paramgen_curve:prime256v1 -nodes";
        for (name, subject) in [
            ("ca", "geofold-test-ca-one"),
            ("other-ca", "geofold-test-ca-two"),
        ] {
            pki.openssl(&format!(
                "req -config pki.cnf -x509 -new {ec} -keyout {name}.key -out {name}.crt -days 2 \
                 -subj /CN={subject} -extensions ca_ext"
            ));
        }
        for (name, subject, ca, extensions) in [
            ("server", "localhost", "ca", "server_ext"),
            ("certuser", "certuser", "ca", "client_ext"),
            ("stranger", "certuser", "other-ca", "client_ext"),
        ] {
            pki.openssl(&format!(
                "req -config pki.cnf -new {ec} -keyout {name}.key -out {name}.csr -subj /CN={subject}"
            ));
            pki.openssl(&format!(
                "x509 -req -in {name}.csr -CA {ca}.crt -CAkey {ca}.key -CAcreateserial \
                 -out {name}.crt -days 2 -extfile pki.cnf -extensions {extensions}"
            ));
        }
        // Revocation lists of the first CA: one empty, one naming the server certificate.
        let ca = "ca -config pki.cnf -keyfile ca.key -cert ca.crt";
        pki.openssl(&format!("{ca} -gencrl -out empty.crl"));
        pki.openssl(&format!("{ca} -revoke server.crt"));
        pki.openssl(&format!("{ca} -gencrl -out revoked.crl"));
        #[cfg(unix)]
        for key in ["certuser.key", "stranger.key", "server.key"] {
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(pki.path(key), std::fs::Permissions::from_mode(0o600))
                .unwrap();
        }
        pki
    }

    /// Runs `openssl` with whitespace-separated arguments in the PKI directory.
    fn openssl(&self, args: &str) {
        let output = Command::new("openssl")
            .args(args.split_whitespace())
            .current_dir(self.dir.path())
            .output()
            .expect("openssl runs");
        assert!(
            output.status.success(),
            "openssl {args} failed:\n{}",
            String::from_utf8_lossy(&output.stderr)
        );
    }

    fn path(&self, name: &str) -> PathBuf {
        self.dir.path().join(name)
    }

    fn file(&self, name: &str) -> String {
        self.path(name).display().to_string()
    }
}

/// A HOME with `~/.postgresql/` holding the named files (copied from the PKI).
fn home_with(pki: &Pki, files: &[(&str, &str)]) -> tempfile::TempDir {
    let home = tempfile::tempdir().expect("home");
    let dir = home.path().join(".postgresql");
    std::fs::create_dir_all(&dir).unwrap();
    for (from, to) in files {
        std::fs::copy(pki.path(from), dir.join(to)).unwrap();
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            std::fs::set_permissions(dir.join(to), std::fs::Permissions::from_mode(0o600)).unwrap();
        }
    }
    home
}

#[test]
fn pgsslmode_require_holds_when_sslmode_is_only_text_inside_another_value() {
    // The TLS-downgrade defect. libpq: an environment variable fills a keyword
    // exactly when the connection string does not set that keyword (PostgreSQL
    // docs "Environment Variables"; fe-connect.c conninfo_add_defaults).
    let home = tempfile::tempdir().unwrap();
    let plain = Cluster::start(&[("PG_THROWAWAY_TLS", "off")]);
    let db = |port: u16, app: &str| {
        format!(
            "host=127.0.0.1 port={port} user=postgres dbname=geofold_test application_name='{app} sslmode=disable'"
        )
    };
    // The server without TLS is up and takes unencrypted sessions.
    connected(
        connect(
            &db(plain.port, "gf-plain"),
            &[("PGSSLMODE", "disable")],
            home.path(),
        ),
        "sslmode=disable on a server without TLS",
    );
    // sslmode=require: "only try an SSL connection" (docs, "SSL Mode Descriptions").
    let error = refused(
        connect(
            &db(plain.port, "gf-downgrade"),
            &[("PGSSLMODE", "require")],
            home.path(),
        ),
        "PGSSLMODE=require against a server without TLS",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE, "{error}");
    assert!(error.to_string().contains("does not offer TLS"), "{error}");
    // sslmode=prefer goes on without TLS there, as libpq does.
    let _session = connected(
        connect(
            &db(plain.port, "gf-prefer-plain"),
            &[("PGSSLMODE", "prefer")],
            home.path(),
        ),
        "sslmode=prefer on a server without TLS",
    );
    assert!(!encrypted(&plain.uri, "gf-prefer-plain sslmode=disable"));
    // The same string against the suite's TLS server is encrypted.
    let uri = db_uri();
    let _session = connected(
        connect(
            &db(port_of(&uri), "gf-upgrade"),
            &[("PGSSLMODE", "require")],
            home.path(),
        ),
        "PGSSLMODE=require against the TLS server",
    );
    assert!(encrypted(&uri, "gf-upgrade sslmode=disable"));
}

#[test]
fn certificates_are_verified_as_libpq_verifies_them() {
    // PostgreSQL docs, libpq "SSL Support": "Client Verification of Server
    // Certificates" and table "SSL Mode Descriptions"; libpq initialize_SSL
    // (fe-secure-openssl.c) for the root file rules.
    let pki = Pki::new();
    let (cert, key) = (pki.file("server.crt"), pki.file("server.key"));
    let server = Cluster::start(&[
        ("PG_THROWAWAY_SERVER_CERT", cert.as_str()),
        ("PG_THROWAWAY_SERVER_KEY", key.as_str()),
    ]);
    let empty_home = tempfile::tempdir().unwrap();
    let home = empty_home.path();
    let base = format!("port={} user=postgres dbname=geofold_test", server.port);
    let ca = pki.file("ca.crt");
    let other_ca = pki.file("other-ca.crt");

    // verify-full: the chain and the host name, from the certificate's subjectAltName.
    let _session = connected(
        connect(&format!("host=localhost {base} sslmode=verify-full sslrootcert={ca} application_name=gf-vf-name"), &[], home),
        "verify-full, host name on the certificate",
    );
    assert!(encrypted(&server.uri, "gf-vf-name"));
    connected(
        connect(
            &format!("host=127.0.0.1 {base} sslmode=verify-full sslrootcert={ca}"),
            &[],
            home,
        ),
        "verify-full, address on the certificate (iPAddress SAN)",
    );
    let error = refused(
        connect(
            &format!(
                "hostaddr=127.0.0.1 host=wrong.example {base} sslmode=verify-full sslrootcert={ca}"
            ),
            &[],
            home,
        ),
        "verify-full with a host name not on the certificate",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    let message = error.to_string();
    assert!(
        message.contains("wrong host name") && message.contains("wrong.example"),
        "{message}"
    );

    // verify-ca checks the chain only: the wrong name is fine, another CA is not.
    connected(
        connect(
            &format!(
                "hostaddr=127.0.0.1 host=wrong.example {base} sslmode=verify-ca sslrootcert={ca}"
            ),
            &[],
            home,
        ),
        "verify-ca ignores the host name",
    );
    let error = refused(
        connect(
            &format!("host=localhost {base} sslmode=verify-ca sslrootcert={other_ca}"),
            &[],
            home,
        ),
        "verify-ca with a certificate from another CA",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    assert!(error.to_string().contains("unknown CA"), "{error}");
    // The default root file is ~/.postgresql/root.crt; without it verify-ca is a configuration error.
    let error = refused(
        connect(
            &format!("host=localhost {base} sslmode=verify-ca"),
            &[],
            home,
        ),
        "verify-ca without a root file",
    );
    assert_eq!(error.exit_code(), exit::CONFIG);
    assert!(
        error.to_string().contains("root.crt\" does not exist"),
        "{error}"
    );
    let with_root = home_with(&pki, &[("ca.crt", "root.crt")]);
    connected(
        connect(
            &format!("host=localhost {base} sslmode=verify-full"),
            &[],
            with_root.path(),
        ),
        "verify-full with ~/.postgresql/root.crt",
    );

    // require without a root file encrypts without checking; with one, the
    // chain is checked ("if a root CA file exists, sslmode=require behaves
    // like verify-ca", docs, "SSL Mode Descriptions").
    let _session = connected(
        connect(
            &format!("host=localhost {base} sslmode=require application_name=gf-require"),
            &[],
            home,
        ),
        "require without a root file",
    );
    assert!(encrypted(&server.uri, "gf-require"));
    let wrong_root = home_with(&pki, &[("other-ca.crt", "root.crt")]);
    let error = refused(
        connect(
            &format!("host=localhost {base} sslmode=require"),
            &[],
            wrong_root.path(),
        ),
        "require with a root file of another CA",
    );
    assert!(error.to_string().contains("unknown CA"), "{error}");
    // prefer with that root file: the TLS attempt fails and libpq tries once
    // more without TLS (fe-connect.c PQconnectPoll), which this server allows.
    let _session = connected(
        connect(
            &format!("host=localhost {base} sslmode=prefer application_name=gf-prefer-fallback"),
            &[],
            wrong_root.path(),
        ),
        "prefer falls back to no TLS",
    );
    assert!(!encrypted(&server.uri, "gf-prefer-fallback"));
    // PGSSLROOTCERT names the root file as sslrootcert does.
    connected(
        connect(
            &format!("host=localhost {base} sslmode=verify-full"),
            &[("PGSSLROOTCERT", &ca)],
            home,
        ),
        "PGSSLROOTCERT",
    );

    // Revocation lists (sslcrl, sslcrldir): checked along the chain.
    connected(
        connect(
            &format!(
                "host=localhost {base} sslmode=verify-full sslrootcert={ca} sslcrl={}",
                pki.file("empty.crl")
            ),
            &[],
            home,
        ),
        "a revocation list that does not name the server certificate",
    );
    let error = refused(
        connect(
            &format!(
                "host=localhost {base} sslmode=verify-full sslrootcert={ca} sslcrl={}",
                pki.file("revoked.crl")
            ),
            &[],
            home,
        ),
        "a revoked server certificate",
    );
    assert!(error.to_string().contains("revoked"), "{error}");
    let crl_dir = tempfile::tempdir().unwrap();
    std::fs::copy(pki.path("revoked.crl"), crl_dir.path().join("0a1b2c3d.r0")).unwrap();
    let error = refused(
        connect(
            &format!(
                "host=localhost {base} sslmode=verify-ca sslrootcert={ca} sslcrldir={}",
                crl_dir.path().display()
            ),
            &[],
            home,
        ),
        "a revoked server certificate, list in sslcrldir",
    );
    assert!(error.to_string().contains("revoked"), "{error}");

    // No TLS over a Unix-domain socket, whatever sslmode says: libpq does not
    // ask for it there (fe-connect.c PQconnectPoll, "Don't request SSL or
    // GSSAPI over Unix sockets").
    let _session = connected(
        connect(
            &format!(
                "host={} {base} sslmode=verify-full application_name=gf-socket",
                server.dir.display()
            ),
            &[],
            home,
        ),
        "verify-full over the socket",
    );
    assert!(!encrypted(&server.uri, "gf-socket"));

    // sslrootcert=system: the system's roots, which do not hold the test CA
    // (libpq 16+; docs, "SSL Support").
    let error = refused(
        connect(
            &format!("host=localhost {base} sslrootcert=system"),
            &[],
            home,
        ),
        "sslrootcert=system with a private CA",
    );
    assert!(error.to_string().contains("unknown CA"), "{error}");
}

#[test]
fn logins_by_client_certificate_and_password_and_their_refusals() {
    // pg_hba.conf "cert" and "scram-sha-256" methods (PostgreSQL docs "Client
    // Authentication"); libpq client certificate files (docs, "SSL Support",
    // table "Libpq/Client SSL File Usage").
    let pki = Pki::new();
    let scratch = tempfile::tempdir().unwrap();
    let hba = scratch.path().join("hba.conf");
    std::fs::write(
        &hba,
        "hostssl all certuser 127.0.0.1/32 cert\n\
         hostnossl all certuser 127.0.0.1/32 reject\n\
         hostssl all tlsonly 127.0.0.1/32 trust\n\
         hostnossl all tlsonly 127.0.0.1/32 reject\n\
         host all pwuser 127.0.0.1/32 scram-sha-256\n",
    )
    .unwrap();
    let (cert, key, ca) = (
        pki.file("server.crt"),
        pki.file("server.key"),
        pki.file("ca.crt"),
    );
    let hba = hba.display().to_string();
    let server = Cluster::start(&[
        ("PG_THROWAWAY_SERVER_CERT", cert.as_str()),
        ("PG_THROWAWAY_SERVER_KEY", key.as_str()),
        ("PG_THROWAWAY_CLIENT_CA", ca.as_str()),
        ("PG_THROWAWAY_HBA", hba.as_str()),
    ]);
    let os_user =
        String::from_utf8(Command::new("id").arg("-un").output().unwrap().stdout).unwrap();
    let os_user = os_user.trim();
    psql_at(
        &server.uri,
        &format!(
            "CREATE ROLE certuser LOGIN; CREATE ROLE tlsonly LOGIN; \
             CREATE ROLE pwuser LOGIN PASSWORD 'right-horse'; \
             DO $$ BEGIN CREATE ROLE \"{os_user}\" LOGIN; \
             EXCEPTION WHEN duplicate_object THEN NULL; END $$;"
        ),
    );
    let home = tempfile::tempdir().unwrap();
    let host = format!("host=localhost port={} dbname=geofold_test", server.port);
    let who = |session: &Session| query(session, "SELECT current_user::text")[0].clone();

    // Client certificate named by sslcert/sslkey: accepted as certuser.
    let session = connected(
        connect(
            &format!(
                "{host} user=certuser sslmode=verify-full sslrootcert={ca} sslcert={} sslkey={}",
                pki.file("certuser.crt"),
                pki.file("certuser.key")
            ),
            &[],
            home.path(),
        ),
        "client certificate",
    );
    assert_eq!(who(&session), "certuser");
    // The default files ~/.postgresql/postgresql.crt and .key are used when present.
    let home_cert = home_with(
        &pki,
        &[
            ("ca.crt", "root.crt"),
            ("certuser.crt", "postgresql.crt"),
            ("certuser.key", "postgresql.key"),
        ],
    );
    connected(
        connect(
            &format!("{host} user=certuser sslmode=verify-full"),
            &[],
            home_cert.path(),
        ),
        "client certificate from ~/.postgresql",
    );
    // Without a certificate the server refuses the login: 28000, exit 77.
    let error = refused(
        connect(
            &format!("{host} user=certuser sslmode=verify-full sslrootcert={ca}"),
            &[],
            home.path(),
        ),
        "cert login without a certificate",
    );
    assert_eq!(error.exit_code(), exit::NO_PERMISSION, "{error}");
    assert!(error.to_string().contains("certificate"), "{error}");
    // A certificate from a CA the server does not trust ends the handshake.
    let error = refused(
        connect(
            &format!(
                "{host} user=certuser sslmode=verify-full sslrootcert={ca} sslcert={} sslkey={}",
                pki.file("stranger.crt"),
                pki.file("stranger.key")
            ),
            &[],
            home.path(),
        ),
        "client certificate from another CA",
    );
    assert!(error.to_string().contains("client certificate"), "{error}");
    // A key others can read is refused before connecting, as libpq does.
    let open_key = scratch.path().join("open.key");
    std::fs::copy(pki.path("certuser.key"), &open_key).unwrap();
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&open_key, std::fs::Permissions::from_mode(0o644)).unwrap();
    }
    let error = refused(
        connect(
            &format!(
                "{host} user=certuser sslmode=require sslcert={} sslkey={}",
                pki.file("certuser.crt"),
                open_key.display()
            ),
            &[],
            home.path(),
        ),
        "world-readable client key",
    );
    assert_eq!(error.exit_code(), exit::CONFIG);
    assert!(
        error.to_string().contains("group or world access"),
        "{error}"
    );

    // sslmode=allow: without TLS first; this role is refused that way, so TLS next (fe-connect.c).
    let _session = connected(
        connect(
            &format!("{host} user=tlsonly sslmode=allow application_name=gf-allow"),
            &[],
            home.path(),
        ),
        "allow with a role that needs TLS",
    );
    assert!(encrypted(&server.uri, "gf-allow"));

    // Passwords: wrong → 28P01, exit 77, not retried; right one from the password file.
    let started = Instant::now();
    let error = refused(
        Session::connect_with(
            Some(&format!(
                "{host} user=pwuser password=wrong-horse sslmode=disable"
            )),
            &ConnectOptions {
                retry_for: Duration::from_secs(60),
                ..options(&[], home.path())
            },
        ),
        "wrong password",
    );
    assert_eq!(error.exit_code(), exit::NO_PERMISSION, "{error}");
    assert!(
        error.to_string().contains("password authentication failed"),
        "{error}"
    );
    assert!(
        started.elapsed() < Duration::from_secs(30),
        "a refused login is not retried for the whole bound"
    );
    let passfile = scratch.path().join("pgpass");
    std::fs::write(
        &passfile,
        format!(
            "localhost:{}:geofold_test:pwuser:right-horse\n",
            server.port
        ),
    )
    .unwrap();
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        std::fs::set_permissions(&passfile, std::fs::Permissions::from_mode(0o600)).unwrap();
    }
    let passfile = passfile.display().to_string();
    connected(
        connect(
            &format!("{host} user=pwuser"),
            &[("PGPASSFILE", &passfile)],
            home.path(),
        ),
        "password from the password file",
    );
    let error = refused(
        connect(
            &format!("{host} user=pwuser password=wrong"),
            &[("PGPASSFILE", &passfile)],
            home.path(),
        ),
        "a given password wins over the file",
    );
    assert!(
        error.to_string().contains("password authentication failed"),
        "{error}"
    );
    // No password anywhere, and the server asks for one: a configuration problem.
    let error = refused(
        connect(&format!("{host} user=pwuser"), &[], home.path()),
        "no password",
    );
    assert_eq!(error.exit_code(), exit::CONFIG, "{error}");

    // A database that does not exist: 3D000, exit 66, with the server's words.
    let error = refused(
        connect(
            &format!("{host} user=postgres dbname=no_such_db"),
            &[],
            home.path(),
        ),
        "missing database",
    );
    assert_eq!(error.exit_code(), exit::NO_INPUT, "{error}");
    assert!(
        error
            .to_string()
            .contains("database \"no_such_db\" does not exist"),
        "{error}"
    );

    // No user anywhere: the operating-system user (libpq pg_fe_getauthname), not "postgres".
    let session = connected(
        connect(&format!("{host} sslmode=disable"), &[], home.path()),
        "default user",
    );
    assert_eq!(who(&session), os_user);
}

#[test]
fn service_file_beats_the_environment_and_the_string_beats_the_service() {
    // libpq conninfo_add_defaults order; PostgreSQL docs "The Connection
    // Service File". psql, which is libpq, is the reference for the outcome.
    let uri = db_uri();
    let port = port_of(&uri);
    let dead = dead_port();
    let scratch = tempfile::tempdir().unwrap();
    let services = scratch.path().join("services.conf");
    std::fs::write(
        &services,
        format!("# nightly jobs\n[nightly]\nhost=127.0.0.1\nport={port}\ndbname=geofold_test\nuser=postgres\n"),
    )
    .unwrap();
    let services = services.display().to_string();
    let dead_text = dead.to_string();
    let env = [
        ("PGSERVICEFILE", services.as_str()),
        ("PGPORT", dead_text.as_str()),
        ("PGHOST", "127.0.0.1"),
    ];
    let home = scratch.path();
    let session = connected(
        connect("service=nightly", &env, home),
        "service beats PGPORT",
    );
    let geofold_port = query(&session, "SELECT current_setting('port')")[0].clone();
    let psql_port = Command::new("psql")
        .args([
            "-X",
            "-A",
            "-t",
            "-c",
            "SELECT current_setting('port')",
            "service=nightly",
        ])
        .env_clear()
        .env("PATH", std::env::var("PATH").unwrap_or_default())
        .env("HOME", home)
        .envs(env)
        .output()
        .expect("psql runs");
    assert!(
        psql_port.status.success(),
        "{}",
        String::from_utf8_lossy(&psql_port.stderr)
    );
    assert_eq!(
        geofold_port,
        String::from_utf8_lossy(&psql_port.stdout).trim()
    );
    assert_eq!(geofold_port, port.to_string());
    // PGSERVICE names it too, and the GDAL PG: prefix is accepted.
    let with_service = [env[0], env[1], env[2], ("PGSERVICE", "nightly")];
    connected(
        connect("PG:dbname=geofold_test", &with_service, home),
        "PGSERVICE with PG: prefix",
    );
    // The string beats the service: an explicit dead port fails.
    let error = refused(
        connect(&format!("service=nightly port={dead}"), &env, home),
        "explicit port over the service",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE, "{error}");
    // An unknown service is a configuration error (libpq: definition of service not found).
    let error = refused(connect("service=elsewhere", &env, home), "unknown service");
    assert_eq!(error.exit_code(), exit::CONFIG);
    assert!(
        error
            .to_string()
            .contains("definition of service \"elsewhere\" not found"),
        "{error}"
    );
}

#[test]
fn connection_strings_reach_the_same_session_as_psql() {
    // psql (libpq) and geofold get the same string and environment; the server
    // says which role, database and application name each session got.
    let uri = db_uri();
    let port = port_of(&uri);
    let home = tempfile::tempdir().unwrap();
    let os_user =
        String::from_utf8(Command::new("id").arg("-un").output().unwrap().stdout).unwrap();
    let os_user = os_user.trim().to_string();
    psql_at(
        &uri,
        &format!(
            "DO $$ BEGIN CREATE ROLE \"{os_user}\" LOGIN; EXCEPTION WHEN duplicate_object THEN NULL; END $$"
        ),
    );
    let sql =
        "SELECT current_user::text, current_database()::text, current_setting('application_name')";
    let cases = [
        format!(r"host=127.0.0.1 port={port} user=postgres dbname='geofold_test' application_name='it\'s a \\ test'"),
        format!("postgresql://postgres@127.0.0.1:{port}/geofold%5Ftest?application_name=per%20cent"),
        format!("postgresql:///geofold_test?host=127.0.0.1&port={port}&user=postgres&application_name=query"),
        format!("postgresql://127.0.0.1:{port},127.0.0.1:{port}/geofold_test?user=postgres&application_name=two"),
        // No user: both take the operating-system user.
        format!("host=127.0.0.1 port={port} dbname=geofold_test application_name=os-user"),
    ];
    for case in &cases {
        let session = connected(connect(case, &[], home.path()), case);
        let ours = query(&session, sql).join("|");
        let theirs = Command::new("psql")
            .args(["-X", "-A", "-t", "-c", sql, case])
            .env_clear()
            .env("PATH", std::env::var("PATH").unwrap_or_default())
            .env("HOME", home.path())
            .output()
            .expect("psql runs");
        assert!(
            theirs.status.success(),
            "{case}: {}",
            String::from_utf8_lossy(&theirs.stderr)
        );
        assert_eq!(
            ours,
            String::from_utf8_lossy(&theirs.stdout).trim(),
            "{case}"
        );
    }
    let session = connected(connect(&cases[4], &[], home.path()), "os user");
    assert_eq!(query(&session, "SELECT current_user::text")[0], os_user);
}

#[test]
fn errors_keep_their_cause_and_map_to_exit_codes() {
    // libpq keeps the operating system's words for a failed connect
    // (fe-connect.c connectFailureMessage) and names the host it could not
    // resolve ("could not translate host name"); exit codes per sysexits(3)
    // as documented in docs/connecting.md.
    let home = tempfile::tempdir().unwrap();
    let dead = dead_port();
    // Connection refused: the operating system's words, exit 69.
    let error = refused(
        connect(
            &format!("host=127.0.0.1 port={dead} user=postgres"),
            &[],
            home.path(),
        ),
        "nobody listening",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    assert!(error.to_string().contains("Connection refused"), "{error}");
    assert!(
        std::error::Error::source(&error).is_some(),
        "the cause is kept"
    );
    // A name that does not resolve (.invalid never does: RFC 6761 section 6.4).
    let error = refused(
        connect("host=no-such-host.invalid user=postgres", &[], home.path()),
        "unknown host",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    assert!(
        error
            .to_string()
            .contains("could not translate host name \"no-such-host.invalid\""),
        "{error}"
    );

    // A server that takes the connection but never answers: connect_timeout
    // (libpq: "Maximum time to wait while connecting", minimum 2 s) ends it.
    let silent = std::net::TcpListener::bind("127.0.0.1:0").expect("bind");
    let silent_port = silent.local_addr().expect("address").port();
    let error = refused(
        connect(
            &format!("host=127.0.0.1 port={silent_port} user=postgres connect_timeout=2"),
            &[],
            home.path(),
        ),
        "a server that never answers",
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    assert!(
        error.to_string().contains("timeout expired after 2 s"),
        "{error}"
    );
    drop(silent);

    // Through the binary: exit codes and messages as a scheduler sees them.
    let workdir = Workdir::new();
    let geofold = |db: &str, retry: &str| {
        let mut command = workdir.geofold();
        command.args([
            "run",
            "--db",
            db,
            "--table",
            "public.no_such_table",
            "--target",
            "y",
            "--features",
            "a",
            "--block-size",
            "100",
        ]);
        command
            .env("GEOFOLD_CONNECT_RETRY", retry)
            .env("HOME", home.path());
        for variable in [
            "PGSERVICE",
            "PGSSLMODE",
            "PGHOST",
            "PGPORT",
            "PGUSER",
            "PGDATABASE",
            "PGPASSWORD",
        ] {
            command.env_remove(variable);
        }
        run(command)
    };
    let output = geofold(
        &format!("host=127.0.0.1 port={dead} user=postgres colour=red"),
        "0",
    );
    assert_eq!(code(&output), exit::CONFIG);
    assert!(
        String::from_utf8_lossy(&output.stderr).contains("invalid connection option \"colour\"")
    );
    let output = geofold(
        &format!("host=127.0.0.1 port={dead} user=postgres password=hunter2"),
        "0",
    );
    assert_eq!(code(&output), exit::UNAVAILABLE);
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        stderr.contains("Connection refused") && stderr.contains(&format!("127.0.0.1:{dead}")),
        "{stderr}"
    );
    assert!(!stderr.contains("hunter2"), "no password in messages");
    let output = geofold(&format!("host=127.0.0.1 port={dead}"), "soon");
    assert_eq!(code(&output), exit::CONFIG, "a bad GEOFOLD_CONNECT_RETRY");
    // The GDAL/QGIS PG: prefix connects; the missing table is then exit 66.
    let output = geofold(
        &format!(
            "PG:host=127.0.0.1 port={} user=postgres dbname=geofold_test",
            port_of(&db_uri())
        ),
        "0",
    );
    assert_eq!(code(&output), exit::NO_INPUT);
    assert!(String::from_utf8_lossy(&output.stderr).contains("no_such_table"));
}

#[test]
fn a_server_that_is_not_up_is_retried_within_the_bound() {
    // Bounded retries with doubling waits: common practice, no source. Not a
    // speed test: only that it waits about the bound, not at once and not forever.
    let home = tempfile::tempdir().unwrap();
    let db = format!("host=127.0.0.1 port={} user=postgres", dead_port());
    let bound = Duration::from_secs(3);
    let started = Instant::now();
    let error = refused(
        Session::connect_with(
            Some(&db),
            &ConnectOptions {
                retry_for: bound,
                ..options(&[], home.path())
            },
        ),
        "nobody listening, with retries",
    );
    let elapsed = started.elapsed();
    assert!(
        elapsed >= bound - Duration::from_millis(100),
        "retried until the bound: {elapsed:?}"
    );
    assert!(
        elapsed < Duration::from_secs(30),
        "gave up after the bound: {elapsed:?}"
    );
    assert_eq!(error.exit_code(), exit::UNAVAILABLE);
    assert!(error.to_string().contains("gave up after"), "{error}");
    // With no retries, one attempt.
    let error = refused(connect(&db, &[], home.path()), "nobody listening, once");
    assert!(!error.to_string().contains("gave up after"), "{error}");
}

#[test]
fn a_self_signed_certificate_in_the_root_file_is_trusted_as_psql_trusts_it() {
    // The suite's server has a self-signed certificate (CA:TRUE, CN=localhost,
    // no subjectAltName), the setup of PostgreSQL docs "Creating Certificates"
    // with the certificate copied to the client as its root file. psql
    // (libpq/OpenSSL) is the reference: same outcome for each mode and host.
    let uri = db_uri();
    let port = port_of(&uri);
    let home = tempfile::tempdir().unwrap();
    let root = home.path().join("server-as-root.crt");
    std::fs::write(
        &root,
        psql_at(&uri, "SELECT pg_read_file('server.crt')") + "\n",
    )
    .unwrap();
    let mut outcomes = Vec::new();
    for host in ["localhost", "127.0.0.1"] {
        for mode in ["require", "verify-ca", "verify-full"] {
            let db = format!(
                "host={host} port={port} user=postgres dbname=geofold_test sslmode={mode} sslrootcert={}",
                root.display()
            );
            let ours = connect(&db, &[], home.path()).is_ok();
            let theirs = Command::new("psql")
                .args(["-X", "-A", "-t", "-c", "SELECT 1", &db])
                .env_clear()
                .env("PATH", std::env::var("PATH").unwrap_or_default())
                .env("HOME", home.path())
                .output()
                .expect("psql runs")
                .status
                .success();
            assert_eq!(
                ours, theirs,
                "{host} sslmode={mode}: geofold {ours}, psql {theirs}"
            );
            outcomes.push(ours);
        }
    }
    // The Common Name names localhost, not the address: only verify-full at 127.0.0.1 fails.
    assert_eq!(outcomes, [true, true, true, true, true, false]);
}

//! TLS the way libpq does it, on rustls with the ring provider.
//!
//! The rules follow libpq's `initialize_SSL` (fe-secure-openssl.c) and the
//! PostgreSQL documentation, libpq "SSL Support":
//!
//! - Trusted roots come from `sslrootcert`, else `~/.postgresql/root.crt`;
//!   `sslrootcert=system` takes the operating system's roots.
//! - When a root file is there, the server's certificate chain is checked
//!   against it in *every* mode that uses TLS, `allow`, `prefer` and `require`
//!   included (libpq sets `SSL_VERIFY_PEER` whenever it loaded a root file; the
//!   docs' note that `require` then "behaves like verify-ca"). Without one,
//!   `allow`, `prefer` and `require` encrypt without checking the certificate,
//!   and `verify-ca` / `verify-full` refuse to start.
//! - `verify-full` also checks the host name: the subjectAltName entries, or
//!   the Common Name when the certificate has no subjectAltName of that kind
//!   (docs, "Client Verification of Server Certificates").
//! - A certificate that is itself in the root file is trusted as it is, as
//!   OpenSSL does; this is how a self-signed server certificate copied to
//!   `root.crt` works (rustls alone refuses a CA certificate used as a server
//!   certificate).
//! - Revocation lists: `sslcrl` / `sslcrldir`, else `~/.postgresql/root.crl`,
//!   checked for the whole chain, as libpq's `X509_V_FLAG_CRL_CHECK_ALL`.
//! - Client certificates: `sslcert` / `sslkey`, else
//!   `~/.postgresql/postgresql.crt` / `.key` when the certificate file exists.
//!   The key must not be readable by group or others (0600, or 0640 when owned
//!   by root), as libpq demands.
//!
//! Handshake signatures are always verified, so the session key is bound to
//! the certificate the server showed, checked or not.

use std::future::Future;
use std::path::{Path, PathBuf};
use std::pin::Pin;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::task::{Context, Poll};

use rustls::client::danger::{HandshakeSignatureValid, ServerCertVerified, ServerCertVerifier};
use rustls::client::WebPkiServerVerifier;
use rustls::crypto::{
    ring, verify_tls12_signature, verify_tls13_signature, WebPkiSupportedAlgorithms,
};
use rustls::pki_types::pem::PemObject;
use rustls::pki_types::{
    CertificateDer, CertificateRevocationListDer, PrivateKeyDer, ServerName, UnixTime,
};
use rustls::{CertificateError, DigitallySignedStruct, RootCertStore, SignatureScheme};
use tokio::io::{AsyncRead, AsyncWrite};
use tokio_postgres::tls::{MakeTlsConnect, TlsConnect};
use tokio_postgres_rustls::MakeRustlsConnect;
use x509_cert::der::Decode;

use crate::error::Error;

/// The six `sslmode` values, in order of strength (PostgreSQL docs, libpq
/// "SSL Support", table "SSL Mode Descriptions").
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum SslMode {
    /// Never TLS.
    Disable,
    /// Without TLS first; with TLS if the server refuses that.
    Allow,
    /// TLS first; without if the server does not offer it or the TLS attempt fails.
    Prefer,
    /// TLS or nothing.
    Require,
    /// TLS, and the certificate chain must lead to a trusted root.
    VerifyCa,
    /// As `VerifyCa`, and the certificate must name the host.
    VerifyFull,
}

impl SslMode {
    /// Parses a libpq `sslmode` value.
    pub fn parse(text: &str) -> Option<SslMode> {
        Some(match text {
            "disable" => SslMode::Disable,
            "allow" => SslMode::Allow,
            "prefer" => SslMode::Prefer,
            "require" => SslMode::Require,
            "verify-ca" => SslMode::VerifyCa,
            "verify-full" => SslMode::VerifyFull,
            _ => return None,
        })
    }

    /// The libpq spelling.
    pub fn as_str(self) -> &'static str {
        match self {
            SslMode::Disable => "disable",
            SslMode::Allow => "allow",
            SslMode::Prefer => "prefer",
            SslMode::Require => "require",
            SslMode::VerifyCa => "verify-ca",
            SslMode::VerifyFull => "verify-full",
        }
    }

    /// True for `verify-ca` and `verify-full`, which cannot work without roots.
    pub fn verifies(self) -> bool {
        matches!(self, SslMode::VerifyCa | SslMode::VerifyFull)
    }
}

/// A TLS protocol version as libpq names it (`ssl_min_protocol_version`).
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord)]
pub enum TlsVersion {
    /// `TLSv1`
    V1_0,
    /// `TLSv1.1`
    V1_1,
    /// `TLSv1.2`
    V1_2,
    /// `TLSv1.3`
    V1_3,
}

impl TlsVersion {
    /// Parses `TLSv1`, `TLSv1.1`, `TLSv1.2` or `TLSv1.3`, in any letter case as
    /// libpq's `sslVerifyProtocolVersion` does.
    pub fn parse(text: &str) -> Option<TlsVersion> {
        Some(match text.to_ascii_lowercase().as_str() {
            "tlsv1" => TlsVersion::V1_0,
            "tlsv1.1" => TlsVersion::V1_1,
            "tlsv1.2" => TlsVersion::V1_2,
            "tlsv1.3" => TlsVersion::V1_3,
            _ => return None,
        })
    }
}

/// Where the trusted roots come from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Roots {
    /// A PEM file: named by `sslrootcert` (`named`), or the default `~/.postgresql/root.crt`.
    File {
        /// The file.
        path: PathBuf,
        /// True when the user named it; a named file must exist.
        named: bool,
    },
    /// `sslrootcert=system`: the operating system's trusted roots.
    System,
    /// No `sslrootcert` and no home directory to look in.
    Unknown,
}

/// Where certificate revocation lists come from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Revocation {
    /// Neither named nor found.
    None,
    /// `~/.postgresql/root.crl`, used when it exists.
    DefaultFile(PathBuf),
    /// `sslcrl` and/or `sslcrldir`; each named one must exist.
    Named {
        /// A PEM file of revocation lists.
        file: Option<PathBuf>,
        /// A directory of PEM files of revocation lists.
        dir: Option<PathBuf>,
    },
}

/// The client certificate and key files.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ClientCertificate {
    /// The certificate (chain) in PEM.
    pub cert: PathBuf,
    /// The private key in PEM (PKCS#8, PKCS#1 or SEC1) or DER.
    pub key: PathBuf,
    /// True when `sslcert` was given; a named certificate must exist.
    pub named: bool,
}

/// Everything TLS needs, resolved from the connection parameters.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Settings {
    /// `sslmode`.
    pub mode: SslMode,
    /// `sslrootcert`.
    pub roots: Roots,
    /// `sslcrl`, `sslcrldir`.
    pub revocation: Revocation,
    /// `sslcert`, `sslkey`; `None` with `sslcertmode=disable` or no home directory.
    pub client: Option<ClientCertificate>,
    /// `sslsni`: send the host name in the handshake.
    pub sni: bool,
    /// `ssl_min_protocol_version` (default TLSv1.2, as libpq).
    pub min_version: TlsVersion,
    /// `ssl_max_protocol_version`.
    pub max_version: Option<TlsVersion>,
    /// `sslnegotiation=direct`: TLS from the first byte, with ALPN `postgresql`.
    pub direct: bool,
}

/// What the connector checks about the server's certificate.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Checks {
    /// Nothing: encrypted, but the certificate is not checked.
    EncryptOnly,
    /// The chain against the roots named here.
    Chain {
        /// Where the roots came from, for messages.
        roots: String,
    },
    /// The chain and the host name.
    ChainAndName {
        /// Where the roots came from, for messages.
        roots: String,
    },
}

/// A TLS connector for tokio-postgres with what it checks.
#[derive(Clone)]
pub struct Connector {
    make: MakeRustlsConnect,
    /// What the connector checks about the server certificate.
    pub checks: Checks,
}

/// Builds the connector: reads the root, revocation and client files.
///
/// # Errors
/// [`Error::Config`] for a missing root file in a verifying mode, a named file
/// that does not exist, a file that cannot be read or parsed, a private key
/// readable by others, an encrypted private key, or TLS versions rustls does
/// not offer.
pub fn connector(settings: &Settings) -> Result<Connector, Error> {
    let provider = Arc::new(ring::default_provider());
    let trust = load_roots(settings)?;
    let versions = protocol_versions(settings.min_version, settings.max_version)?;
    let builder = rustls::ClientConfig::builder_with_provider(provider.clone())
        .with_protocol_versions(&versions)
        .map_err(|e| Error::Internal(format!("configuring TLS: {e}")))?
        .dangerous();
    let (chain, checks) = match trust {
        None => (None, Checks::EncryptOnly),
        Some(trust) => {
            let crls = load_revocation_lists(&settings.revocation)?;
            let webpki = WebPkiServerVerifier::builder_with_provider(
                Arc::new(trust.store),
                provider.clone(),
            )
            .with_crls(crls)
            .enforce_revocation_expiration()
            .build()
            .map_err(|e| {
                Error::Config(format!("cannot use the trusted roots {}: {e}", trust.from))
            })?;
            let check_name = settings.mode == SslMode::VerifyFull;
            let checks = if check_name {
                Checks::ChainAndName { roots: trust.from }
            } else {
                Checks::Chain { roots: trust.from }
            };
            let chain = ChainCheck {
                webpki,
                pinned: trust.certificates,
                check_name,
            };
            (Some(chain), checks)
        }
    };
    let builder = builder.with_custom_certificate_verifier(Arc::new(Verifier {
        algorithms: provider.signature_verification_algorithms,
        chain,
    }));
    let mut config = match load_client_certificate(settings.client.as_ref())? {
        Some((chain, key, path)) => builder.with_client_auth_cert(chain, key).map_err(|e| {
            Error::Config(format!(
                "cannot use client certificate {}: {e}",
                path.display()
            ))
        })?,
        None => builder.with_no_client_auth(),
    };
    config.enable_sni = settings.sni;
    if settings.direct {
        // PostgreSQL 17 requires ALPN "postgresql" on direct TLS connections.
        config.alpn_protocols = vec![b"postgresql".to_vec()];
    }
    Ok(Connector {
        make: MakeRustlsConnect::new(config),
        checks,
    })
}

/// The rustls protocol versions within `[min, max]`. rustls offers TLS 1.2
/// and 1.3 only, so a range below 1.2 is refused rather than silently raised.
fn protocol_versions(
    min: TlsVersion,
    max: Option<TlsVersion>,
) -> Result<Vec<&'static rustls::SupportedProtocolVersion>, Error> {
    let max = max.unwrap_or(TlsVersion::V1_3);
    let mut versions = Vec::new();
    if min <= TlsVersion::V1_2 && max >= TlsVersion::V1_2 {
        versions.push(&rustls::version::TLS12);
    }
    if max >= TlsVersion::V1_3 {
        versions.push(&rustls::version::TLS13);
    }
    if versions.is_empty() {
        return Err(Error::Config(
            "ssl_max_protocol_version below TLSv1.2: geofold's TLS library offers TLS 1.2 and 1.3 only"
                .into(),
        ));
    }
    Ok(versions)
}

/// Roots read from a file or the system, with the certificates themselves
/// (for self-signed server certificates trusted directly).
struct Trust {
    store: RootCertStore,
    certificates: Vec<CertificateDer<'static>>,
    from: String,
}

fn load_roots(settings: &Settings) -> Result<Option<Trust>, Error> {
    let verifying = settings.mode.verifies();
    let hint = "Either provide the file, use the system's trusted roots with sslrootcert=system, \
                or change sslmode to disable server certificate verification";
    match &settings.roots {
        Roots::System => {
            let found = rustls_native_certs::load_native_certs();
            if found.certs.is_empty() {
                let problems: Vec<String> = found.errors.iter().map(|e| e.to_string()).collect();
                return Err(Error::Config(format!(
                    "sslrootcert=system: no trusted roots found on this system ({})",
                    problems.join("; ")
                )));
            }
            let mut store = RootCertStore::empty();
            store.add_parsable_certificates(found.certs.iter().cloned());
            Ok(Some(Trust {
                store,
                certificates: Vec::new(),
                from: "the system's trusted roots".into(),
            }))
        }
        Roots::Unknown if verifying => Err(Error::Config(format!(
            "could not get home directory to locate root certificate file. {hint}"
        ))),
        Roots::Unknown => Ok(None),
        Roots::File { path, named } => {
            if !path.exists() {
                if verifying {
                    return Err(Error::Config(format!(
                        "root certificate file \"{}\" does not exist. {hint}",
                        path.display()
                    )));
                }
                if *named {
                    // libpq would go on without checking; a named file that is
                    // missing is more likely a mistake than a wish.
                    return Err(Error::Config(format!(
                        "root certificate file \"{}\" (sslrootcert) does not exist",
                        path.display()
                    )));
                }
                return Ok(None);
            }
            let certificates = read_certificates(path, "root certificate")?;
            let mut store = RootCertStore::empty();
            for certificate in &certificates {
                store.add(certificate.clone()).map_err(|e| {
                    Error::Config(format!("root certificate file \"{}\": {e}", path.display()))
                })?;
            }
            Ok(Some(Trust {
                store,
                certificates,
                from: format!("\"{}\"", path.display()),
            }))
        }
    }
}

fn read_certificates(path: &Path, what: &str) -> Result<Vec<CertificateDer<'static>>, Error> {
    let bytes = std::fs::read(path).map_err(|e| {
        Error::Config(format!(
            "could not read {what} file \"{}\": {e}",
            path.display()
        ))
    })?;
    let certificates = CertificateDer::pem_slice_iter(&bytes)
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| Error::Config(format!("{what} file \"{}\": {e}", path.display())))?;
    if certificates.is_empty() {
        return Err(Error::Config(format!(
            "{what} file \"{}\" holds no PEM certificate",
            path.display()
        )));
    }
    Ok(certificates)
}

fn load_revocation_lists(
    revocation: &Revocation,
) -> Result<Vec<CertificateRevocationListDer<'static>>, Error> {
    let read = |path: &Path| -> Result<Vec<CertificateRevocationListDer<'static>>, Error> {
        let bytes = std::fs::read(path).map_err(|e| {
            Error::Config(format!(
                "could not read revocation list \"{}\": {e}",
                path.display()
            ))
        })?;
        CertificateRevocationListDer::pem_slice_iter(&bytes)
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| Error::Config(format!("revocation list \"{}\": {e}", path.display())))
    };
    match revocation {
        Revocation::None => Ok(Vec::new()),
        Revocation::DefaultFile(path) if path.exists() => read(path),
        Revocation::DefaultFile(_) => Ok(Vec::new()),
        Revocation::Named { file, dir } => {
            let mut lists = Vec::new();
            if let Some(file) = file {
                let found = read(file)?;
                if found.is_empty() {
                    return Err(Error::Config(format!(
                        "revocation list file \"{}\" (sslcrl) holds no PEM revocation list",
                        file.display()
                    )));
                }
                lists.extend(found);
            }
            if let Some(dir) = dir {
                // OpenSSL looks lists up by hashed names; reading every file
                // in the directory finds the same lists.
                let entries = std::fs::read_dir(dir).map_err(|e| {
                    Error::Config(format!(
                        "could not read revocation list directory \"{}\" (sslcrldir): {e}",
                        dir.display()
                    ))
                })?;
                for entry in entries.flatten() {
                    let path = entry.path();
                    if path.is_file() {
                        lists.extend(read(&path)?);
                    }
                }
            }
            Ok(lists)
        }
    }
}

type ClientAuth = (
    Vec<CertificateDer<'static>>,
    PrivateKeyDer<'static>,
    PathBuf,
);

fn load_client_certificate(
    client: Option<&ClientCertificate>,
) -> Result<Option<ClientAuth>, Error> {
    let Some(client) = client else {
        return Ok(None);
    };
    if !client.cert.exists() {
        if client.named {
            // libpq would go on without a certificate; a named file that is
            // missing is more likely a mistake than a wish.
            return Err(Error::Config(format!(
                "client certificate file \"{}\" (sslcert) does not exist",
                client.cert.display()
            )));
        }
        return Ok(None);
    }
    let chain = read_certificates(&client.cert, "client certificate")?;
    let key_path = &client.key;
    let metadata = std::fs::metadata(key_path).map_err(|e| {
        Error::Config(format!(
            "certificate present, but not private key file \"{}\": {e}",
            key_path.display()
        ))
    })?;
    if !metadata.is_file() {
        return Err(Error::Config(format!(
            "private key file \"{}\" is not a regular file",
            key_path.display()
        )));
    }
    #[cfg(unix)]
    {
        use std::os::unix::fs::MetadataExt;
        // libpq's rule: 0600 or less, or 0640 or less when owned by root.
        let mode = metadata.mode();
        let too_open = if metadata.uid() == 0 {
            mode & 0o037 != 0
        } else {
            mode & 0o077 != 0
        };
        if too_open {
            return Err(Error::Config(format!(
                "private key file \"{}\" has group or world access; file must have permissions \
                 u=rw (0600) or less if owned by the current user, or permissions u=rw,g=r (0640) \
                 or less if owned by root",
                key_path.display()
            )));
        }
    }
    let bytes = std::fs::read(key_path).map_err(|e| {
        Error::Config(format!(
            "could not read private key file \"{}\": {e}",
            key_path.display()
        ))
    })?;
    let text = String::from_utf8_lossy(&bytes);
    if text.contains("ENCRYPTED PRIVATE KEY") || text.contains("Proc-Type: 4,ENCRYPTED") {
        return Err(Error::Config(format!(
            "private key file \"{}\" is encrypted; geofold reads unencrypted keys only \
             (sslpassword is not supported): decrypt a copy with `openssl pkey` and keep it at 0600",
            key_path.display()
        )));
    }
    let key = PrivateKeyDer::from_pem_slice(&bytes)
        .or_else(|_| PrivateKeyDer::try_from(bytes.clone()).map_err(|e| e.to_string()))
        .map_err(|e| {
            Error::Config(format!(
                "could not load private key file \"{}\": {e}",
                key_path.display()
            ))
        })?;
    Ok(Some((chain, key, client.cert.clone())))
}

/// The server-certificate check. Without roots it accepts any certificate
/// (`allow`, `prefer`, `require` with no root file); with them it is webpki's
/// chain check plus libpq's two differences: a certificate found in the root
/// file is trusted as it is, and the host name falls back to the Common Name
/// when the certificate has no subjectAltName of that kind. Handshake
/// signatures are checked either way.
#[derive(Debug)]
struct Verifier {
    algorithms: WebPkiSupportedAlgorithms,
    chain: Option<ChainCheck>,
}

#[derive(Debug)]
struct ChainCheck {
    webpki: Arc<WebPkiServerVerifier>,
    pinned: Vec<CertificateDer<'static>>,
    check_name: bool,
}

impl ServerCertVerifier for Verifier {
    fn verify_server_cert(
        &self,
        end_entity: &CertificateDer<'_>,
        intermediates: &[CertificateDer<'_>],
        server_name: &ServerName<'_>,
        ocsp_response: &[u8],
        now: UnixTime,
    ) -> Result<ServerCertVerified, rustls::Error> {
        let Some(chain) = &self.chain else {
            return Ok(ServerCertVerified::assertion());
        };
        if chain
            .pinned
            .iter()
            .any(|pinned| pinned.as_ref() == end_entity.as_ref())
        {
            check_validity_period(end_entity, now)?;
        } else {
            match chain.webpki.verify_server_cert(
                end_entity,
                intermediates,
                server_name,
                ocsp_response,
                now,
            ) {
                // webpki checks the name last, after the chain and revocation
                // (rustls 0.23 webpki/server_verifier.rs), so a name error
                // means the chain passed; the name is judged below.
                Ok(_)
                | Err(rustls::Error::InvalidCertificate(
                    CertificateError::NotValidForName
                    | CertificateError::NotValidForNameContext { .. },
                )) => {}
                Err(error) => return Err(error),
            }
        }
        if chain.check_name {
            check_host_name(end_entity, server_name)?;
        }
        Ok(ServerCertVerified::assertion())
    }

    fn verify_tls12_signature(
        &self,
        message: &[u8],
        cert: &CertificateDer<'_>,
        dss: &DigitallySignedStruct,
    ) -> Result<HandshakeSignatureValid, rustls::Error> {
        verify_tls12_signature(message, cert, dss, &self.algorithms)
    }

    fn verify_tls13_signature(
        &self,
        message: &[u8],
        cert: &CertificateDer<'_>,
        dss: &DigitallySignedStruct,
    ) -> Result<HandshakeSignatureValid, rustls::Error> {
        verify_tls13_signature(message, cert, dss, &self.algorithms)
    }

    fn supported_verify_schemes(&self) -> Vec<SignatureScheme> {
        self.algorithms.supported_schemes()
    }
}

fn parse_x509(certificate: &CertificateDer<'_>) -> Result<x509_cert::Certificate, rustls::Error> {
    x509_cert::Certificate::from_der(certificate.as_ref())
        .map_err(|_| rustls::Error::InvalidCertificate(CertificateError::BadEncoding))
}

fn check_validity_period(
    certificate: &CertificateDer<'_>,
    now: UnixTime,
) -> Result<(), rustls::Error> {
    let validity = parse_x509(certificate)?.tbs_certificate.validity;
    let now = now.as_secs();
    if now < validity.not_before.to_unix_duration().as_secs() {
        return Err(rustls::Error::InvalidCertificate(
            CertificateError::NotValidYet,
        ));
    }
    if now > validity.not_after.to_unix_duration().as_secs() {
        return Err(rustls::Error::InvalidCertificate(CertificateError::Expired));
    }
    Ok(())
}

/// libpq's host-name rule (docs, "Client Verification of Server Certificates"):
/// subjectAltName entries first; the Common Name only when there is no
/// subjectAltName of type dNSName (for a name), or no iPAddress entry and no
/// matching dNSName entry (for an address).
fn check_host_name(
    certificate: &CertificateDer<'_>,
    server_name: &ServerName<'_>,
) -> Result<(), rustls::Error> {
    let parsed = rustls::server::ParsedCertificate::try_from(certificate)?;
    let error = match rustls::client::verify_server_name(&parsed, server_name) {
        Ok(()) => return Ok(()),
        Err(error) => error,
    };
    let x509 = parse_x509(certificate)?;
    let (has_dns, has_ip) = subject_alt_name_kinds(&x509);
    let fall_back = match server_name {
        ServerName::DnsName(_) => !has_dns,
        _ => !has_ip,
    };
    if fall_back {
        let wanted = match server_name {
            ServerName::DnsName(name) => name.as_ref().to_string(),
            ServerName::IpAddress(address) => std::net::IpAddr::from(*address).to_string(),
            _ => return Err(error),
        };
        if common_names(&x509)
            .iter()
            .any(|cn| name_matches(cn, &wanted))
        {
            return Ok(());
        }
    }
    Err(error)
}

fn subject_alt_name_kinds(certificate: &x509_cert::Certificate) -> (bool, bool) {
    use x509_cert::ext::pkix::name::GeneralName;
    use x509_cert::ext::pkix::SubjectAltName;
    let names = match certificate.tbs_certificate.get::<SubjectAltName>() {
        Ok(Some((_, names))) => names.0,
        _ => return (false, false),
    };
    (
        names.iter().any(|n| matches!(n, GeneralName::DnsName(_))),
        names.iter().any(|n| matches!(n, GeneralName::IpAddress(_))),
    )
}

fn common_names(certificate: &x509_cert::Certificate) -> Vec<String> {
    const COMMON_NAME: x509_cert::der::oid::ObjectIdentifier =
        x509_cert::der::oid::ObjectIdentifier::new_unwrap("2.5.4.3");
    let mut names = Vec::new();
    for rdn in certificate.tbs_certificate.subject.0.iter() {
        for attribute in rdn.0.iter() {
            if attribute.oid != COMMON_NAME {
                continue;
            }
            let value = &attribute.value;
            let text = value
                .decode_as::<x509_cert::der::asn1::Utf8StringRef<'_>>()
                .map(|s| s.as_str().to_string())
                .or_else(|_| {
                    value
                        .decode_as::<x509_cert::der::asn1::PrintableStringRef<'_>>()
                        .map(|s| s.as_str().to_string())
                })
                .or_else(|_| {
                    value
                        .decode_as::<x509_cert::der::asn1::Ia5StringRef<'_>>()
                        .map(|s| s.as_str().to_string())
                });
            if let Ok(text) = text {
                names.push(text);
            }
        }
    }
    names
}

/// A certificate name against a host, as libpq's `pq_verify_peer_name_matches_certificate_name`:
/// case-insensitive, and a leading `*.` matches one label (no dots).
fn name_matches(certificate_name: &str, host: &str) -> bool {
    let certificate_name = certificate_name.to_ascii_lowercase();
    let host = host.to_ascii_lowercase();
    if let Some(suffix) = certificate_name.strip_prefix('*') {
        if suffix.starts_with('.') && host.len() > suffix.len() && host.ends_with(suffix) {
            let label = &host[..host.len() - suffix.len()];
            return !label.contains('.');
        }
        return false;
    }
    certificate_name == host
}

/// Whether a TLS handshake began and whether it finished, for libpq's
/// `prefer` rule: after a failed TLS attempt, try once more without TLS.
#[derive(Debug, Default)]
pub struct Handshake {
    started: AtomicBool,
    finished: AtomicBool,
}

impl Handshake {
    /// The server agreed to TLS and the handshake began.
    pub fn started(&self) -> bool {
        self.started.load(Ordering::SeqCst)
    }

    /// The handshake completed: the connection is encrypted.
    pub fn finished(&self) -> bool {
        self.finished.load(Ordering::SeqCst)
    }
}

impl Connector {
    /// A connector for one connection attempt, with its handshake record.
    pub fn watched(&self) -> (Watched, Arc<Handshake>) {
        let handshake = Arc::new(Handshake::default());
        (
            Watched {
                make: self.make.clone(),
                handshake: handshake.clone(),
            },
            handshake,
        )
    }
}

/// [`MakeRustlsConnect`] that records the handshake in a [`Handshake`].
pub struct Watched {
    make: MakeRustlsConnect,
    handshake: Arc<Handshake>,
}

impl<S> MakeTlsConnect<S> for Watched
where
    S: AsyncRead + AsyncWrite + Unpin + Send + 'static,
{
    type Stream = <MakeRustlsConnect as MakeTlsConnect<S>>::Stream;
    type TlsConnect = WatchedConnect<<MakeRustlsConnect as MakeTlsConnect<S>>::TlsConnect>;
    type Error = <MakeRustlsConnect as MakeTlsConnect<S>>::Error;

    fn make_tls_connect(&mut self, domain: &str) -> Result<Self::TlsConnect, Self::Error> {
        Ok(WatchedConnect {
            inner: MakeTlsConnect::<S>::make_tls_connect(&mut self.make, domain)?,
            handshake: self.handshake.clone(),
        })
    }
}

/// One TLS handshake that records its start and end.
pub struct WatchedConnect<T> {
    inner: T,
    handshake: Arc<Handshake>,
}

impl<S, T> TlsConnect<S> for WatchedConnect<T>
where
    T: TlsConnect<S>,
    T::Future: Unpin,
{
    type Stream = T::Stream;
    type Error = T::Error;
    type Future = WatchedFuture<T::Future>;

    fn connect(self, stream: S) -> Self::Future {
        self.handshake.started.store(true, Ordering::SeqCst);
        WatchedFuture {
            inner: self.inner.connect(stream),
            handshake: self.handshake,
        }
    }
}

/// The handshake future; marks the handshake finished when it succeeds.
pub struct WatchedFuture<F> {
    inner: F,
    handshake: Arc<Handshake>,
}

impl<F, T, E> Future for WatchedFuture<F>
where
    F: Future<Output = Result<T, E>> + Unpin,
{
    type Output = Result<T, E>;

    fn poll(mut self: Pin<&mut Self>, cx: &mut Context<'_>) -> Poll<Self::Output> {
        let result = Pin::new(&mut self.inner).poll(cx);
        if let Poll::Ready(Ok(_)) = &result {
            self.handshake.finished.store(true, Ordering::SeqCst);
        }
        result
    }
}

/// Plain words for a failed TLS handshake, naming the reason.
pub fn explain(error: &rustls::Error, host: Option<&str>, checks: &Checks) -> String {
    let roots = match checks {
        Checks::Chain { roots } | Checks::ChainAndName { roots } => roots.as_str(),
        Checks::EncryptOnly => "the trusted roots",
    };
    let host = host.unwrap_or("?");
    match error {
        rustls::Error::InvalidCertificate(problem) => match problem {
            CertificateError::UnknownIssuer => format!(
                "certificate verify failed: the server certificate is not signed by a certificate \
                 authority in {roots} (unknown CA)"
            ),
            CertificateError::NotValidForName | CertificateError::NotValidForNameContext { .. } => {
                format!(
                    "certificate verify failed: the server certificate does not match host name \
                     \"{host}\" (wrong host name; {error})"
                )
            }
            CertificateError::Expired | CertificateError::ExpiredContext { .. } => {
                format!("certificate verify failed: the server certificate has expired ({error})")
            }
            CertificateError::NotValidYet | CertificateError::NotValidYetContext { .. } => format!(
                "certificate verify failed: the server certificate is not valid yet ({error})"
            ),
            CertificateError::Revoked => {
                "certificate verify failed: the server certificate has been revoked".to_string()
            }
            CertificateError::UnknownRevocationStatus => {
                "certificate verify failed: no revocation list covers a certificate of the \
                 server's chain (sslcrl/sslcrldir must hold the list of every issuing CA)"
                    .to_string()
            }
            CertificateError::ExpiredRevocationList
            | CertificateError::ExpiredRevocationListContext { .. } => {
                format!("certificate verify failed: a revocation list has expired ({error})")
            }
            _ => format!("certificate verify failed: {error}"),
        },
        rustls::Error::AlertReceived(alert) => {
            use rustls::AlertDescription as A;
            let about_client = matches!(
                alert,
                A::CertificateRequired
                    | A::UnknownCA
                    | A::BadCertificate
                    | A::CertificateUnknown
                    | A::CertificateExpired
                    | A::CertificateRevoked
                    | A::AccessDenied
            );
            if about_client {
                format!(
                    "the server refused the TLS handshake ({alert:?}): it did not accept the \
                     client certificate (sslcert), or wanted one"
                )
            } else {
                format!("the server refused the TLS handshake ({alert:?})")
            }
        }
        _ => format!("TLS handshake failed: {error}"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sslmode_values_are_libpqs_six() {
        // PostgreSQL docs, libpq "SSL Support", table "SSL Mode Descriptions".
        for name in [
            "disable",
            "allow",
            "prefer",
            "require",
            "verify-ca",
            "verify-full",
        ] {
            assert_eq!(SslMode::parse(name).map(SslMode::as_str), Some(name));
        }
        assert_eq!(SslMode::parse("verify_full"), None);
        assert_eq!(SslMode::parse("REQUIRE"), None);
    }

    #[test]
    fn wildcard_names_match_one_label() {
        // PostgreSQL docs, "Client Verification of Server Certificates": an
        // asterisk matches all characters except a dot.
        assert!(name_matches("*.gis.example", "db1.gis.example"));
        assert!(!name_matches("*.gis.example", "a.db1.gis.example"));
        assert!(!name_matches("*.gis.example", "gis.example"));
        assert!(name_matches("DB1.gis.example", "db1.GIS.example"));
        assert!(!name_matches("db1.gis.example", "db2.gis.example"));
    }

    #[test]
    fn protocol_ranges_map_onto_what_rustls_offers() {
        // libpq default minimum is TLSv1.2 (fe-connect.c PQconninfoOptions).
        assert_eq!(protocol_versions(TlsVersion::V1_2, None).unwrap().len(), 2);
        assert_eq!(
            protocol_versions(TlsVersion::V1_3, None).unwrap(),
            vec![&rustls::version::TLS13]
        );
        assert_eq!(
            protocol_versions(TlsVersion::V1_0, Some(TlsVersion::V1_2)).unwrap(),
            vec![&rustls::version::TLS12]
        );
        assert!(protocol_versions(TlsVersion::V1_0, Some(TlsVersion::V1_1)).is_err());
        assert_eq!(TlsVersion::parse("tlsV1.3"), Some(TlsVersion::V1_3));
        assert_eq!(TlsVersion::parse("TLSv1.4"), None);
    }

    fn settings(mode: SslMode, roots: Roots) -> Settings {
        Settings {
            mode,
            roots,
            revocation: Revocation::None,
            client: None,
            sni: true,
            min_version: TlsVersion::V1_2,
            max_version: None,
            direct: false,
        }
    }

    #[test]
    fn verifying_modes_need_a_root_file_and_others_go_without() {
        // libpq initialize_SSL: a missing root file is an error for verify-ca
        // and verify-full only; other modes go on without verification.
        let dir = tempfile::tempdir().unwrap();
        let missing = dir.path().join("root.crt");
        for mode in [SslMode::VerifyCa, SslMode::VerifyFull] {
            let result = connector(&settings(
                mode,
                Roots::File {
                    path: missing.clone(),
                    named: false,
                },
            ));
            match result {
                Err(Error::Config(message)) => {
                    assert!(message.contains("does not exist"), "{message}")
                }
                _ => panic!("{mode:?} without roots must be a configuration error"),
            }
        }
        for mode in [SslMode::Allow, SslMode::Prefer, SslMode::Require] {
            let connector = connector(&settings(
                mode,
                Roots::File {
                    path: missing.clone(),
                    named: false,
                },
            ))
            .ok()
            .unwrap();
            assert_eq!(connector.checks, Checks::EncryptOnly);
        }
        // A root file named by sslrootcert that is missing is refused even
        // for require (a deliberate difference from libpq, which skips checks).
        assert!(connector(&settings(
            SslMode::Require,
            Roots::File {
                path: missing,
                named: true
            }
        ))
        .is_err());
    }
}

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

mod files;
mod verify;
use files::*;
use verify::*;

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
mod tests;

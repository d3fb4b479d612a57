//! TLS for `sslmode=prefer` and `sslmode=require`, with libpq's meaning: the
//! connection is encrypted, but the server certificate is not checked against
//! a certificate authority or the host name (libpq documentation, "SSL Support",
//! table "SSL Mode Descriptions": require protects against eavesdropping, not
//! against a man in the middle). Handshake signatures are still verified, so
//! the session key is bound to the certificate the server presented.
//!
//! `verify-ca` and `verify-full` are not offered yet and are refused as
//! configuration errors rather than weakened.

use std::sync::Arc;

use rustls::client::danger::{HandshakeSignatureValid, ServerCertVerified, ServerCertVerifier};
use rustls::crypto::{
    ring, verify_tls12_signature, verify_tls13_signature, WebPkiSupportedAlgorithms,
};
use rustls::pki_types::{CertificateDer, ServerName, UnixTime};
use rustls::{DigitallySignedStruct, SignatureScheme};
use tokio_postgres_rustls::MakeRustlsConnect;

use crate::error::Error;

/// Accepts any server certificate; checks handshake signatures.
#[derive(Debug)]
struct EncryptOnly {
    algorithms: WebPkiSupportedAlgorithms,
}

impl ServerCertVerifier for EncryptOnly {
    fn verify_server_cert(
        &self,
        _end_entity: &CertificateDer<'_>,
        _intermediates: &[CertificateDer<'_>],
        _server_name: &ServerName<'_>,
        _ocsp_response: &[u8],
        _now: UnixTime,
    ) -> Result<ServerCertVerified, rustls::Error> {
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

/// The TLS connector for `prefer` and `require`.
///
/// # Errors
/// [`Error::Internal`] if the TLS library cannot be configured.
pub fn encrypt_only() -> Result<MakeRustlsConnect, Error> {
    let provider = Arc::new(ring::default_provider());
    let algorithms = provider.signature_verification_algorithms;
    let config = rustls::ClientConfig::builder_with_provider(provider)
        .with_safe_default_protocol_versions()
        .map_err(|e| Error::Internal(format!("configuring TLS: {e}")))?
        .dangerous()
        .with_custom_certificate_verifier(Arc::new(EncryptOnly { algorithms }))
        .with_no_client_auth();
    Ok(MakeRustlsConnect::new(config))
}

//! Verifying the server certificate as libpq does: the chain against the roots, the validity
//! period, revocation, and for verify-full the host name (with libpq's Common Name fallback).

use super::*;

/// The server-certificate check. Without roots it accepts any certificate
/// (`allow`, `prefer`, `require` with no root file); with them it is webpki's
/// chain check plus libpq's two differences: a certificate found in the root
/// file is trusted as it is, and the host name falls back to the Common Name
/// when the certificate has no subjectAltName of that kind. Handshake
/// signatures are checked either way.
#[derive(Debug)]
pub(super) struct Verifier {
    pub(super) algorithms: WebPkiSupportedAlgorithms,
    pub(super) chain: Option<ChainCheck>,
}

#[derive(Debug)]
pub(super) struct ChainCheck {
    pub(super) webpki: Arc<WebPkiServerVerifier>,
    pub(super) pinned: Vec<CertificateDer<'static>>,
    pub(super) check_name: bool,
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

pub(super) fn parse_x509(
    certificate: &CertificateDer<'_>,
) -> Result<x509_cert::Certificate, rustls::Error> {
    x509_cert::Certificate::from_der(certificate.as_ref())
        .map_err(|_| rustls::Error::InvalidCertificate(CertificateError::BadEncoding))
}

pub(super) fn check_validity_period(
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
pub(super) fn check_host_name(
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

pub(super) fn subject_alt_name_kinds(certificate: &x509_cert::Certificate) -> (bool, bool) {
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

pub(super) fn common_names(certificate: &x509_cert::Certificate) -> Vec<String> {
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
pub(super) fn name_matches(certificate_name: &str, host: &str) -> bool {
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

//! Reading the TLS files libpq names: root certificates, revocation lists, and the client
//! certificate and key (with libpq's key-permission check).

use super::*;

/// Roots read from a file or the system, with the certificates themselves
/// (for self-signed server certificates trusted directly).
pub(super) struct Trust {
    pub(super) store: RootCertStore,
    pub(super) certificates: Vec<CertificateDer<'static>>,
    pub(super) from: String,
}

pub(super) fn load_roots(settings: &Settings) -> Result<Option<Trust>, Error> {
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

pub(super) fn read_certificates(
    path: &Path,
    what: &str,
) -> Result<Vec<CertificateDer<'static>>, Error> {
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

pub(super) fn load_revocation_lists(
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

pub(super) type ClientAuth = (
    Vec<CertificateDer<'static>>,
    PrivateKeyDer<'static>,
    PathBuf,
);

pub(super) fn load_client_certificate(
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

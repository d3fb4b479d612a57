//! Tests of `tls`.

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

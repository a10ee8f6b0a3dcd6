//! TLS with rustls and its ring provider, for the three places plumbline speaks it: the service's
//! own listener (`serve --tls-cert --tls-key`), the PostgreSQL store (`sslmode` in the URL) and
//! `replay --against https://…`. Certificates and keys are PEM files.

use rustls::client::danger::{HandshakeSignatureValid, ServerCertVerified, ServerCertVerifier};
use rustls::client::WebPkiServerVerifier;
use rustls::crypto::CryptoProvider;
use rustls::pki_types::pem::PemObject;
use rustls::pki_types::{CertificateDer, PrivateKeyDer, ServerName, UnixTime};
use rustls::{
    CertificateError, ClientConfig, DigitallySignedStruct, RootCertStore, ServerConfig,
    SignatureScheme,
};
use std::path::Path;
use std::sync::Arc;

fn provider() -> Arc<CryptoProvider> {
    Arc::new(rustls::crypto::ring::default_provider())
}

/// How a client checks the server's certificate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Check {
    /// Encryption only: any certificate is accepted (its handshake signature is still checked).
    /// What PostgreSQL's `sslmode=prefer` and `require` do without a root certificate.
    Nothing,
    /// The chain must lead to a trusted root; the host name is not compared.
    Chain,
    /// The chain must lead to a trusted root and the certificate must name the host.
    ChainAndName,
}

/// Trusted roots: the certificates of a PEM file, or without one the Mozilla set
/// (webpki-roots).
pub fn roots(pem: Option<&Path>) -> Result<RootCertStore, String> {
    let mut store = RootCertStore::empty();
    let Some(path) = pem else {
        store.extend(webpki_roots::TLS_SERVER_ROOTS.iter().cloned());
        return Ok(store);
    };
    let certs = CertificateDer::pem_file_iter(path)
        .and_then(|certs| certs.collect::<Result<Vec<_>, _>>())
        .map_err(|e| format!("cannot read root certificates from {}: {e}", path.display()))?;
    let (added, _) = store.add_parsable_certificates(certs);
    if added == 0 {
        return Err(format!(
            "{} holds no usable root certificate (PEM)",
            path.display()
        ));
    }
    Ok(store)
}

/// A client configuration that checks servers as `check` says against `roots`.
pub fn client_config(roots: RootCertStore, check: Check) -> Result<ClientConfig, String> {
    let builder = ClientConfig::builder_with_provider(provider())
        .with_safe_default_protocol_versions()
        .map_err(|e| e.to_string())?;
    let webpki = WebPkiServerVerifier::builder_with_provider(Arc::new(roots), provider())
        .build()
        .map_err(|e| format!("cannot check certificates: {e}"))?;
    let config = match check {
        Check::ChainAndName => builder.with_webpki_verifier(webpki).with_no_client_auth(),
        Check::Chain | Check::Nothing => builder
            .dangerous()
            .with_custom_certificate_verifier(Arc::new(Lenient {
                inner: webpki,
                check,
            }))
            .with_no_client_auth(),
    };
    Ok(config)
}

/// A listener's configuration from a certificate chain and its private key (PEM files).
pub fn server_config(cert: &Path, key: &Path) -> Result<ServerConfig, String> {
    let chain = CertificateDer::pem_file_iter(cert)
        .and_then(|certs| certs.collect::<Result<Vec<_>, _>>())
        .map_err(|e| format!("cannot read the certificate chain {}: {e}", cert.display()))?;
    if chain.is_empty() {
        return Err(format!("{} holds no certificate (PEM)", cert.display()));
    }
    let key = PrivateKeyDer::from_pem_file(key)
        .map_err(|e| format!("cannot read the private key {}: {e}", key.display()))?;
    ServerConfig::builder_with_provider(provider())
        .with_safe_default_protocol_versions()
        .map_err(|e| e.to_string())?
        .with_no_client_auth()
        .with_single_cert(chain, key)
        .map_err(|e| format!("the certificate and key do not make a TLS identity: {e}"))
}

/// The checks of [`Check::Chain`] and [`Check::Nothing`]: the standard verifier's, with the
/// name (or the whole chain) forgiven. Handshake signatures are always checked, so the peer
/// holds the certificate's key.
#[derive(Debug)]
struct Lenient {
    inner: Arc<WebPkiServerVerifier>,
    check: Check,
}

impl ServerCertVerifier for Lenient {
    fn verify_server_cert(
        &self,
        end_entity: &CertificateDer<'_>,
        intermediates: &[CertificateDer<'_>],
        server_name: &ServerName<'_>,
        ocsp: &[u8],
        now: UnixTime,
    ) -> Result<ServerCertVerified, rustls::Error> {
        if self.check == Check::Nothing {
            return Ok(ServerCertVerified::assertion());
        }
        match (self.inner).verify_server_cert(end_entity, intermediates, server_name, ocsp, now) {
            Err(rustls::Error::InvalidCertificate(
                CertificateError::NotValidForName | CertificateError::NotValidForNameContext { .. },
            )) => Ok(ServerCertVerified::assertion()),
            other => other,
        }
    }

    fn verify_tls12_signature(
        &self,
        message: &[u8],
        cert: &CertificateDer<'_>,
        dss: &DigitallySignedStruct,
    ) -> Result<HandshakeSignatureValid, rustls::Error> {
        self.inner.verify_tls12_signature(message, cert, dss)
    }

    fn verify_tls13_signature(
        &self,
        message: &[u8],
        cert: &CertificateDer<'_>,
        dss: &DigitallySignedStruct,
    ) -> Result<HandshakeSignatureValid, rustls::Error> {
        self.inner.verify_tls13_signature(message, cert, dss)
    }

    fn supported_verify_schemes(&self) -> Vec<SignatureScheme> {
        self.inner.supported_verify_schemes()
    }
}

/// Whether a PostgreSQL connection uses TLS (tokio-postgres's three modes).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Use {
    Never,
    IfOffered,
    Always,
}

/// The TLS settings of a PostgreSQL URL, read as libpq reads `sslmode` and `sslrootcert`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct PostgresTls {
    pub mode: Use,
    pub check: Check,
    /// `sslrootcert`: the trusted roots (PEM); without it the Mozilla set.
    pub roots: Option<std::path::PathBuf>,
}

/// Takes `sslmode` and `sslrootcert` out of a `postgres://` URL's query (tokio-postgres reads
/// neither `verify-ca`, `verify-full` nor `sslrootcert`) and returns the rest of the URL with
/// the settings. libpq's meanings: `disable`; `prefer` (the default: TLS when the server offers
/// it, certificate not checked); `require` (TLS always; the chain is checked only when
/// `sslrootcert` is given); `verify-ca` (the chain); `verify-full` (the chain and the host
/// name). `allow` is refused: tokio-postgres cannot fall back that way.
pub fn postgres_url(url: &str) -> Result<(String, PostgresTls), String> {
    let (base, query) = url.split_once('?').unwrap_or((url, ""));
    let mut mode = None;
    let mut roots = None;
    let mut rest = form_urlencoded::Serializer::new(String::new());
    let mut kept = 0;
    for (k, v) in form_urlencoded::parse(query.as_bytes()) {
        match k.as_ref() {
            "sslmode" => mode = Some(v.into_owned()),
            "sslrootcert" => roots = Some(std::path::PathBuf::from(v.as_ref())),
            _ => {
                rest.append_pair(&k, &v);
                kept += 1;
            }
        }
    }
    let rooted = roots.is_some();
    let (mode, check) = match mode.as_deref().unwrap_or("prefer") {
        "disable" => (Use::Never, Check::Nothing),
        "prefer" => (Use::IfOffered, Check::Nothing),
        "require" if rooted => (Use::Always, Check::Chain),
        "require" => (Use::Always, Check::Nothing),
        "verify-ca" => (Use::Always, Check::Chain),
        "verify-full" => (Use::Always, Check::ChainAndName),
        other => {
            return Err(format!(
            "sslmode={other} is not supported: use disable, prefer, require, verify-ca or verify-full"
        ))
        }
    };
    let url = if kept == 0 {
        base.to_string()
    } else {
        format!("{base}?{}", rest.finish())
    };
    Ok((url, PostgresTls { mode, check, roots }))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn postgres_settings_read_as_libpq_reads_them() {
        let (url, tls) = postgres_url("postgres://u@db:5432/x").unwrap();
        assert_eq!(
            (url.as_str(), tls.mode, tls.check),
            ("postgres://u@db:5432/x", Use::IfOffered, Check::Nothing)
        );
        let (url, tls) = postgres_url(
            "postgres://u@db/x?connect_timeout=3&sslmode=verify-full&sslrootcert=%2Fetc%2Fca.pem",
        )
        .unwrap();
        assert_eq!(url, "postgres://u@db/x?connect_timeout=3");
        assert_eq!((tls.mode, tls.check), (Use::Always, Check::ChainAndName));
        assert_eq!(tls.roots.as_deref(), Some(Path::new("/etc/ca.pem")));
        let (_, tls) =
            postgres_url("postgres://u@db/x?sslmode=require&sslrootcert=ca.pem").unwrap();
        assert_eq!(
            tls.check,
            Check::Chain,
            "libpq: require with a root file checks the chain"
        );
        assert!(postgres_url("postgres://u@db/x?sslmode=allow")
            .unwrap_err()
            .contains("allow"));
    }
}

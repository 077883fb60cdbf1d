//! The company's central store in PostgreSQL, and the local side of shipping to it: the
//! site stamp on new events, and the read-only reading of events to ship.
//!
//! Every statement sent to PostgreSQL is here. The central schema (`central.sql`) is made
//! idempotently by whichever shipper connects first; events are keyed by (site, seq) and
//! inserted with `ON CONFLICT DO NOTHING`, so a repeat, a retry after a lost connection or
//! two shippers at once insert each event exactly once.

use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::time::Duration;

use rusqlite::{Connection, OpenFlags};
use tokio_postgres::Client;
use tokio_postgres::config::SslMode;

use super::replay::StoredEvent;
use crate::model::chain::Head;

/// Errors of the central store. Messages never hold the password or the URL.
#[derive(Debug, thiserror::Error)]
pub enum CentralError {
    #[error("central store: {}", with_cause(.0))]
    Postgres(#[from] tokio_postgres::Error),
    #[error("central store address is not valid: {0}")]
    Address(String),
    #[error("central store TLS: {0}")]
    Tls(String),
    #[error("local database: {0}")]
    Local(#[from] rusqlite::Error),
}

pub type Result<T> = std::result::Result<T, CentralError>;

/// The client's error with its cause ("error connecting to server: Connection refused"),
/// which its own message leaves out. Neither names the password.
fn with_cause(e: &tokio_postgres::Error) -> String {
    let text = e.to_string();
    match std::error::Error::source(e).map(ToString::to_string) {
        Some(cause) if !text.contains(&cause) => format!("{text}: {cause}"),
        _ => text,
    }
}

/// Where the central store is and how to log in. Debug shows neither URL nor password.
#[derive(Clone)]
pub struct Target {
    pub url: String,
    pub password: Option<String>,
    pub ca_file: Option<PathBuf>,
}

impl std::fmt::Debug for Target {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("Target(<redacted>)")
    }
}

/// Connect; TLS (rustls, server certificate checked) only when the URL says
/// `sslmode=require`, plain otherwise.
pub async fn connect(t: &Target) -> Result<Client> {
    let mut pg: tokio_postgres::Config = t
        .url
        .parse()
        .map_err(|e: tokio_postgres::Error| CentralError::Address(e.to_string()))?;
    if let Some(p) = &t.password {
        pg.password(p.as_bytes());
    }
    pg.connect_timeout(Duration::from_secs(10));
    pg.application_name("turnbook");
    if pg.get_ssl_mode() == SslMode::Require {
        let tls = tls_connector(t.ca_file.as_deref())?;
        let (client, conn) = pg.connect(tls).await?;
        tokio::spawn(drive(conn));
        Ok(client)
    } else {
        pg.ssl_mode(SslMode::Disable);
        let (client, conn) = pg.connect(tokio_postgres::NoTls).await?;
        tokio::spawn(drive(conn));
        Ok(client)
    }
}

/// Run a connection's protocol until it ends; its end shows as an error on the client.
async fn drive<F: std::future::Future<Output = std::result::Result<(), tokio_postgres::Error>>>(
    conn: F,
) {
    if let Err(e) = conn.await {
        tracing::debug!(error = %e, "central store connection ended");
    }
}

fn tls_connector(ca_file: Option<&Path>) -> Result<tokio_postgres_rustls::MakeRustlsConnect> {
    use rustls::pki_types::CertificateDer;
    use rustls::pki_types::pem::PemObject;
    let mut roots = rustls::RootCertStore::empty();
    match ca_file {
        Some(path) => {
            let certs = CertificateDer::pem_file_iter(path)
                .map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
            for c in certs {
                let c = c.map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
                roots
                    .add(c)
                    .map_err(|e| CentralError::Tls(format!("{}: {e}", path.display())))?;
            }
        }
        None => roots.extend(webpki_roots::TLS_SERVER_ROOTS.iter().cloned()),
    }
    let provider = Arc::new(rustls::crypto::ring::default_provider());
    let config = rustls::ClientConfig::builder_with_provider(provider)
        .with_safe_default_protocol_versions()
        .map_err(|e| CentralError::Tls(e.to_string()))?
        .with_root_certificates(roots)
        .with_no_client_auth();
    Ok(tokio_postgres_rustls::MakeRustlsConnect::new(config))
}

/// Any fixed number: the advisory lock under which the schema is made.
const SCHEMA_LOCK: i64 = 0x7475_726e_626b;

/// Make the central schema and views if they are missing (idempotent, one at a time).
pub async fn prepare(client: &mut Client) -> Result<()> {
    let tx = client.transaction().await?;
    tx.execute("SELECT pg_advisory_xact_lock($1)", &[&SCHEMA_LOCK])
        .await?;
    tx.batch_execute(include_str!("central.sql")).await?;
    tx.commit().await?;
    Ok(())
}

/// Record the site (and its time zone) if it is new.
pub async fn register_site(client: &Client, site: &str, time_zone: Option<&str>) -> Result<()> {
    client
        .execute(
            "INSERT INTO turnbook.sites (site, time_zone) VALUES ($1, $2)
             ON CONFLICT (site) DO UPDATE SET time_zone = EXCLUDED.time_zone
             WHERE turnbook.sites.time_zone IS DISTINCT FROM EXCLUDED.time_zone",
            &[&site, &time_zone],
        )
        .await?;
    Ok(())
}

/// The site's newest event in the central store.
pub async fn head(client: &Client, site: &str) -> Result<Option<Head>> {
    let row = client
        .query_opt(
            "SELECT seq, hash FROM turnbook.events WHERE site = $1 ORDER BY seq DESC LIMIT 1",
            &[&site],
        )
        .await?;
    Ok(row.map(|r| Head {
        seq: r.get(0),
        hash: r.get(1),
    }))
}

/// One central event's identity, for naming it.
#[derive(Debug, Clone)]
pub struct CentralEventInfo {
    pub hash: String,
    pub kind: String,
    pub at: String,
    pub subject: String,
}

/// The site's event `seq` in the central store.
pub async fn event_info(client: &Client, site: &str, seq: i64) -> Result<Option<CentralEventInfo>> {
    let row = client
        .query_opt(
            "SELECT hash, kind, at, subject FROM turnbook.events WHERE site = $1 AND seq = $2",
            &[&site, &seq],
        )
        .await?;
    Ok(row.map(|r| CentralEventInfo {
        hash: r.get(0),
        kind: r.get(1),
        at: r.get(2),
        subject: r.get(3),
    }))
}

/// Insert a batch of the site's events (one statement, so all or none); events the store
/// holds already are left as they are. Returns how many were new.
pub async fn insert_events(client: &Client, site: &str, events: &[StoredEvent]) -> Result<u64> {
    if events.is_empty() {
        return Ok(0);
    }
    let seq: Vec<i64> = events.iter().map(|e| e.seq).collect();
    let col = |f: fn(&StoredEvent) -> &str| events.iter().map(f).collect::<Vec<&str>>();
    let (at, actor, kind) = (col(|e| &e.at), col(|e| &e.actor), col(|e| &e.kind));
    let (subject, payload) = (col(|e| &e.subject), col(|e| &e.payload));
    let (prev, hash) = (col(|e| &e.prev_hash), col(|e| &e.hash));
    let n = client
        .execute(
            "INSERT INTO turnbook.events
                 (site, seq, at, actor, kind, subject, payload, prev_hash, hash)
             SELECT $1, * FROM unnest($2::bigint[], $3::text[], $4::text[], $5::text[],
                                      $6::text[], $7::text[], $8::text[], $9::text[])
             ON CONFLICT (site, seq) DO NOTHING",
            &[
                &site, &seq, &at, &actor, &kind, &subject, &payload, &prev, &hash,
            ],
        )
        .await?;
    client
        .execute(
            "UPDATE turnbook.sites SET last_shipped = now() WHERE site = $1",
            &[&site],
        )
        .await?;
    Ok(n)
}

/// The sites the central store knows, by id.
pub async fn sites(client: &Client) -> Result<Vec<String>> {
    let rows = client
        .query("SELECT site FROM turnbook.sites ORDER BY site", &[])
        .await?;
    Ok(rows.iter().map(|r| r.get(0)).collect())
}

/// One central event with the site its payload names (None when it names none).
#[derive(Debug, Clone)]
pub struct CentralEvent {
    pub event: StoredEvent,
    pub payload_site: Option<String>,
}

/// Call `each` with every event of `site`, in sequence order, as the rows arrive (never
/// all in memory), until it returns false.
pub async fn for_each_event(
    client: &Client,
    site: &str,
    mut each: impl FnMut(CentralEvent) -> bool,
) -> Result<()> {
    use tokio_stream::StreamExt;
    let rows = client
        .query_raw(
            "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash, body ->> 'site'
             FROM turnbook.events WHERE site = $1 ORDER BY seq",
            [site],
        )
        .await?;
    let mut rows = std::pin::pin!(rows);
    while let Some(r) = rows.next().await {
        let r = r?;
        let e = CentralEvent {
            event: StoredEvent {
                seq: r.try_get(0)?,
                at: r.try_get(1)?,
                actor: r.try_get(2)?,
                kind: r.try_get(3)?,
                subject: r.try_get(4)?,
                payload: r.try_get(5)?,
                prev_hash: r.try_get(6)?,
                hash: r.try_get(7)?,
            },
            payload_site: r.try_get(8)?,
        };
        if !each(e) {
            break;
        }
    }
    Ok(())
}

/// A row of `turnbook.lots`.
#[derive(Debug, Clone, serde::Serialize)]
pub struct CentralLot {
    pub site: String,
    pub lot: String,
    pub catalyst: Option<String>,
    pub metal: Option<String>,
    pub family: Option<String>,
    pub loading_wt_pct: Option<f64>,
    pub charged_mass_g: Option<f64>,
    pub registered_at: Option<String>,
    pub cycles: i64,
    pub excluded_cycles: i64,
    pub last_cycle_started: Option<String>,
    pub last_sign_off: Option<String>,
    pub last_sign_off_at: Option<String>,
}

/// The company's lots by site (the `turnbook.lots` view).
pub async fn lots(client: &Client) -> Result<Vec<CentralLot>> {
    let rows = client
        .query(
            "SELECT site, lot, catalyst, metal, family, loading_wt_pct, charged_mass_g,
                    registered_at, cycles, excluded_cycles, last_cycle_started, last_sign_off,
                    last_sign_off_at
             FROM turnbook.lots ORDER BY site, lot",
            &[],
        )
        .await?;
    rows.iter()
        .map(|r| {
            Ok(CentralLot {
                site: r.try_get(0)?,
                lot: r.try_get(1)?,
                catalyst: r.try_get(2)?,
                metal: r.try_get(3)?,
                family: r.try_get(4)?,
                loading_wt_pct: r.try_get(5)?,
                charged_mass_g: r.try_get(6)?,
                registered_at: r.try_get(7)?,
                cycles: r.try_get(8)?,
                excluded_cycles: r.try_get(9)?,
                last_cycle_started: r.try_get(10)?,
                last_sign_off: r.try_get(11)?,
                last_sign_off_at: r.try_get(12)?,
            })
        })
        .collect()
}

// ---- the local side ----

/// Open the site's database read-only, for the shipper: it never takes the write lock,
/// and under WAL it reads beside the service's writer without holding it up.
pub fn open_local_reader(path: &Path) -> Result<Connection> {
    let conn = Connection::open_with_flags(
        path,
        OpenFlags::SQLITE_OPEN_READ_ONLY | OpenFlags::SQLITE_OPEN_NO_MUTEX,
    )?;
    conn.busy_timeout(Duration::from_secs(10))?;
    Ok(conn)
}

/// Up to `limit` events after `after`, in sequence order.
pub fn local_events_after(conn: &Connection, after: i64, limit: usize) -> Result<Vec<StoredEvent>> {
    let mut stmt = conn.prepare_cached(
        "SELECT seq, at, actor, kind, subject, payload, prev_hash, hash FROM events
         WHERE seq > ?1 ORDER BY seq LIMIT ?2",
    )?;
    let limit = i64::try_from(limit).unwrap_or(i64::MAX);
    let rows = stmt.query_map(rusqlite::params![after, limit], |r| {
        Ok(StoredEvent {
            seq: r.get(0)?,
            at: r.get(1)?,
            actor: r.get(2)?,
            kind: r.get(3)?,
            subject: r.get(4)?,
            payload: r.get(5)?,
            prev_hash: r.get(6)?,
            hash: r.get(7)?,
        })
    })?;
    Ok(rows.collect::<std::result::Result<_, _>>()?)
}

/// The hash of the local event `seq`, if there is one.
pub fn local_hash(conn: &Connection, seq: i64) -> Result<Option<String>> {
    use rusqlite::OptionalExtension;
    Ok(conn
        .query_row("SELECT hash FROM events WHERE seq = ?1", [seq], |r| {
            r.get(0)
        })
        .optional()?)
}

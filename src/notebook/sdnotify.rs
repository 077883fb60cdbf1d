//! Telling the service manager how the service is: readiness after the start-up catch-up,
//! and watchdog pings while the ingestion worker is not stuck (the `sd_notify` datagram
//! protocol, systemd's sd_notify(3): `KEY=VALUE` lines sent to the Unix datagram socket
//! named by `$NOTIFY_SOCKET`; a name starting with `@` is in the abstract namespace).
//!
//! Without `$NOTIFY_SOCKET` (not started by systemd with `Type=notify`) every call does
//! nothing, so the same binary runs under any supervisor or none.

use std::sync::Arc;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::{Duration, Instant};

/// Send `message` (e.g. "READY=1") to the service manager, if one listens. Failures are
/// logged, never fatal: a service that works but cannot report it should keep working.
pub fn notify(message: &str) {
    let Some(socket) = std::env::var_os("NOTIFY_SOCKET") else {
        return;
    };
    if let Err(error) = send(&socket, message) {
        tracing::warn!(socket = %socket.to_string_lossy(), %error, message,
            "cannot notify the service manager");
    }
}

#[cfg(target_os = "linux")]
fn send(socket: &std::ffi::OsStr, message: &str) -> std::io::Result<()> {
    use std::os::linux::net::SocketAddrExt;
    use std::os::unix::ffi::OsStrExt;
    use std::os::unix::net::{SocketAddr, UnixDatagram};
    let bytes = socket.as_bytes();
    let addr = match bytes.strip_prefix(b"@") {
        Some(name) => SocketAddr::from_abstract_name(name)?,
        None => SocketAddr::from_pathname(std::path::Path::new(socket))?,
    };
    let sock = UnixDatagram::unbound()?;
    sock.send_to_addr(message.as_bytes(), &addr)?;
    Ok(())
}

#[cfg(not(target_os = "linux"))]
fn send(socket: &std::ffi::OsStr, message: &str) -> std::io::Result<()> {
    let sock = std::os::unix::net::UnixDatagram::unbound()?;
    sock.send_to(message.as_bytes(), socket)?;
    Ok(())
}

/// The watchdog interval systemd asks for (`$WATCHDOG_USEC`, for this process when
/// `$WATCHDOG_PID` is set), or None.
pub fn watchdog_interval() -> Option<Duration> {
    if let Some(pid) = std::env::var("WATCHDOG_PID").ok()
        && pid.trim().parse::<u32>().ok() != Some(std::process::id())
    {
        return None;
    }
    let usec: u64 = std::env::var("WATCHDOG_USEC").ok()?.trim().parse().ok()?;
    (usec > 0).then(|| Duration::from_micros(usec))
}

/// When the ingestion worker started the call it is in (milliseconds since `epoch`, 0 when
/// idle): the watchdog stays silent while one call lasts longer than the watchdog
/// interval, so a read hung on an export share ends in a restart, not a silent stall.
#[derive(Debug)]
pub struct Liveness {
    epoch: Instant,
    busy_since_ms: AtomicU64,
}

impl Default for Liveness {
    fn default() -> Self {
        Liveness {
            epoch: Instant::now(),
            busy_since_ms: AtomicU64::new(0),
        }
    }
}

impl Liveness {
    /// Mark the start of one unit of work; the returned guard marks its end when dropped.
    pub fn busy(self: &Arc<Self>) -> BusyGuard {
        let ms = self.epoch.elapsed().as_millis().max(1) as u64;
        self.busy_since_ms.store(ms, Ordering::SeqCst);
        BusyGuard(Arc::clone(self))
    }

    /// How long the work in progress has lasted, or None when idle.
    pub fn stuck_for(&self) -> Option<Duration> {
        match self.busy_since_ms.load(Ordering::SeqCst) {
            0 => None,
            since => Some(
                self.epoch
                    .elapsed()
                    .saturating_sub(Duration::from_millis(since)),
            ),
        }
    }
}

/// Ends a unit of work of a [`Liveness`] when dropped.
pub struct BusyGuard(Arc<Liveness>);

impl Drop for BusyGuard {
    fn drop(&mut self) {
        self.0.busy_since_ms.store(0, Ordering::SeqCst);
    }
}

/// Ping the watchdog at half its interval until `stop`, while no unit of work of `live`
/// has lasted a whole interval. Returns at once when no watchdog is asked for.
pub async fn watchdog(live: Arc<Liveness>, mut stop: tokio::sync::watch::Receiver<bool>) {
    let Some(interval) = watchdog_interval() else {
        return;
    };
    let mut silent = false;
    loop {
        match live.stuck_for() {
            Some(busy) if busy >= interval => {
                if !silent {
                    tracing::error!(
                        busy_s = busy.as_secs(),
                        "one file has been in ingestion longer than the watchdog interval; \
                         no more watchdog pings, the service manager will restart the service"
                    );
                    silent = true;
                }
            }
            _ => {
                silent = false;
                notify("WATCHDOG=1");
            }
        }
        if *stop.borrow() {
            return;
        }
        tokio::select! {
            _ = tokio::time::sleep(interval / 2) => {}
            _ = stop.changed() => return,
        }
    }
}

/// SIGHUP asks many services to reload; turnbook reads its configuration only at start
/// (the unit has no `ExecReload=`), so a SIGHUP is logged and otherwise ignored instead
/// of ending the service with status 129.
pub async fn log_hangups(mut stop: tokio::sync::watch::Receiver<bool>) {
    #[cfg(unix)]
    {
        use tokio::signal::unix::{SignalKind, signal};
        let mut hangups = match signal(SignalKind::hangup()) {
            Ok(s) => s,
            Err(error) => {
                tracing::warn!(%error, "cannot listen for SIGHUP");
                return;
            }
        };
        loop {
            if *stop.borrow() {
                return;
            }
            tokio::select! {
                got = hangups.recv() => {
                    if got.is_none() {
                        return;
                    }
                    tracing::warn!("SIGHUP received and ignored: the configuration is read at start only; restart the service to apply changes");
                }
                _ = stop.changed() => return,
            }
        }
    }
    #[cfg(not(unix))]
    {
        let _ = stop.changed().await;
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn liveness_reports_a_unit_of_work_while_it_lasts() {
        let live = Arc::new(Liveness::default());
        assert_eq!(live.stuck_for(), None);
        {
            let _busy = live.busy();
            std::thread::sleep(Duration::from_millis(20));
            assert!(
                live.stuck_for()
                    .is_some_and(|d| d >= Duration::from_millis(10))
            );
        }
        assert_eq!(live.stuck_for(), None);
    }
}

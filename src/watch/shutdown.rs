//! Stopping on SIGTERM (systemd) or SIGINT (Ctrl-C), in one place.

use tokio::sync::watch;

#[cfg(unix)]
mod imp {
    use tokio::signal::unix::{Signal, SignalKind, signal};

    /// The installed handlers; a handler that could not be installed is `None`.
    pub struct Handlers {
        terminate: Option<Signal>,
        interrupt: Option<Signal>,
    }

    fn install(kind: SignalKind, name: &'static str) -> Option<Signal> {
        match signal(kind) {
            Ok(stream) => Some(stream),
            Err(error) => {
                tracing::warn!(signal = name, %error, "cannot listen for signal");
                None
            }
        }
    }

    async fn next(stream: Option<&mut Signal>) {
        match stream {
            Some(stream) => {
                stream.recv().await;
            }
            None => std::future::pending::<()>().await,
        }
    }

    pub fn install_all() -> Handlers {
        Handlers {
            terminate: install(SignalKind::terminate(), "SIGTERM"),
            interrupt: install(SignalKind::interrupt(), "SIGINT"),
        }
    }

    impl Handlers {
        pub async fn wait(mut self) {
            tokio::select! {
                () = next(self.terminate.as_mut()) => tracing::info!("SIGTERM received, shutting down"),
                () = next(self.interrupt.as_mut()) => tracing::info!("SIGINT received, shutting down"),
            }
        }
    }
}

#[cfg(not(unix))]
mod imp {
    pub struct Handlers;

    pub fn install_all() -> Handlers {
        Handlers
    }

    impl Handlers {
        pub async fn wait(self) {
            if let Err(error) = tokio::signal::ctrl_c().await {
                tracing::warn!(%error, "cannot listen for Ctrl-C");
                std::future::pending::<()>().await;
            }
        }
    }
}

/// Resolves when the process receives SIGTERM or SIGINT. If a handler cannot be installed,
/// that signal is logged and never fires, rather than stopping the service at once.
pub async fn shutdown_signal() {
    imp::install_all().wait().await;
}

/// A receiver that turns `true` on the first SIGTERM or SIGINT, for [`run`](super::run)
/// and any other task that must stop with the service. Must be called inside a Tokio
/// runtime; the handlers are installed before it returns, so no early signal is missed.
pub fn shutdown_receiver() -> watch::Receiver<bool> {
    let handlers = imp::install_all();
    let (tx, rx) = watch::channel(false);
    tokio::spawn(async move {
        handlers.wait().await;
        // Every receiver may already be gone; then nobody needs telling.
        let _ = tx.send(true);
    });
    rx
}

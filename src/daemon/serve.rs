//! `skerry serve`: the command-line edge of the daemon.

use super::{Listeners, run};
use crate::config::Config;
use std::path::PathBuf;
use tokio_util::sync::CancellationToken;

/// Run the tracking service until SIGINT or SIGTERM.
#[derive(Debug, Clone, clap::Args)]
pub struct ServeArgs {
    /// Configuration file (TOML); without it the embedded demo
    /// configuration is used, on loopback addresses.
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// Log lines as JSON objects (also `serve.log_json`).
    #[arg(long)]
    pub log_json: bool,
    /// Log filter in the tracing `EnvFilter` syntax (default: the
    /// RUST_LOG variable, else `info`).
    #[arg(long, value_name = "FILTER")]
    pub log: Option<String>,
}

/// Sets up logging to standard error: text by default, JSON on request.
/// Does nothing when logging is already set up (tests).
pub fn init_logging(json: bool, filter: Option<&str>) {
    use tracing_subscriber::EnvFilter;
    let filter = match filter {
        Some(f) => EnvFilter::try_new(f).unwrap_or_else(|_| EnvFilter::new("info")),
        None => EnvFilter::try_from_default_env().unwrap_or_else(|_| EnvFilter::new("info")),
    };
    use std::io::IsTerminal;
    // Colours only on a terminal: a journal or a pipe gets plain text.
    let b = tracing_subscriber::fmt().with_env_filter(filter).with_writer(std::io::stderr).with_ansi(std::io::stderr().is_terminal());
    let _ = if json { b.json().try_init() } else { b.try_init() };
}

/// Cancels `token` on the first SIGINT or SIGTERM.
pub fn cancel_on_signal(token: CancellationToken) {
    tokio::spawn(async move {
        #[cfg(unix)]
        {
            use tokio::signal::unix::{SignalKind, signal};
            let (mut term, mut int) = match (signal(SignalKind::terminate()), signal(SignalKind::interrupt())) {
                (Ok(t), Ok(i)) => (t, i),
                _ => {
                    tracing::error!("cannot install signal handlers");
                    return;
                }
            };
            let name = tokio::select! {
                _ = term.recv() => "SIGTERM",
                _ = int.recv() => "SIGINT",
            };
            tracing::info!(signal = name, "signal received");
        }
        #[cfg(not(unix))]
        {
            let _ = tokio::signal::ctrl_c().await;
        }
        token.cancel();
    });
}

pub fn serve_main(args: &ServeArgs) -> anyhow::Result<()> {
    let cfg = Config::load(args.config.as_deref(), &Config::env_overrides())?;
    init_logging(args.log_json || cfg.serve.log_json, args.log.as_deref());
    if args.config.is_none() {
        tracing::info!(site = %cfg.site.name, "no --config given: using the embedded demo configuration");
    }
    let rt = tokio::runtime::Builder::new_multi_thread().enable_all().build()?;
    rt.block_on(async move {
        let listeners = Listeners::bind_config(&cfg).await?;
        let token = CancellationToken::new();
        cancel_on_signal(token.clone());
        run(cfg, listeners, token).await?;
        anyhow::Ok(())
    })
}

//! Logging through tracing: readable lines on stderr, and optionally a daily-rotated file.

use std::io::IsTerminal;

use tracing_subscriber::EnvFilter;
use tracing_subscriber::layer::SubscriberExt;
use tracing_subscriber::util::SubscriberInitExt;

use crate::config::LogConfig;

/// Keeps the file writer flushing; hold it for the life of the process.
pub struct LogGuard {
    _file: Option<tracing_appender::non_blocking::WorkerGuard>,
}

/// Starts logging. `RUST_LOG` overrides the configured level.
pub fn init(config: &LogConfig) -> Result<LogGuard, String> {
    let filter = EnvFilter::try_from_default_env()
        .or_else(|_| EnvFilter::try_new(&config.level))
        .map_err(|e| format!("log.level `{}`: {e}", config.level))?;
    // Colour only for a person at a terminal: a file, a pipe or journald gets plain text (and NO_COLOR,
    // https://no-color.org, turns colour off everywhere).
    let ansi = std::io::stderr().is_terminal() && std::env::var_os("NO_COLOR").is_none_or(|v| v.is_empty());
    let stderr = tracing_subscriber::fmt::layer().with_writer(std::io::stderr).with_target(false).with_ansi(ansi);
    let (file, guard) = match &config.dir {
        None => (None, None),
        Some(dir) => {
            // tracing-appender complains once if the folder is missing: make it first.
            std::fs::create_dir_all(dir).map_err(|e| format!("log.dir {}: {e}", dir.display()))?;
            let appender = tracing_appender::rolling::RollingFileAppender::builder()
                .rotation(tracing_appender::rolling::Rotation::DAILY)
                .filename_prefix("oedolog")
                .filename_suffix("log")
                .max_log_files(config.keep)
                .build(dir)
                .map_err(|e| format!("log.dir {}: {e}", dir.display()))?;
            let (writer, guard) = tracing_appender::non_blocking(appender);
            (Some(tracing_subscriber::fmt::layer().with_writer(writer).with_ansi(false)), Some(guard))
        }
    };
    let _ = tracing_subscriber::registry().with(filter).with(stderr).with(file).try_init();
    Ok(LogGuard { _file: guard })
}

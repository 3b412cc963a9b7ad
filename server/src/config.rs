//! The service's configuration: a TOML file, additions from the command line, defaults.
//!
//! ```toml
//! bind = "127.0.0.1:8080"
//! cache_mb = 256
//! reload_interval_secs = 10
//! cache_max_age_secs = 30
//! equator_band_deg = 5
//! cors_origins = ["https://dashboard.example.org"]
//! tokens = ["a-long-random-secret"]
//!
//! [limits]
//! max_concurrent = 2
//! max_queue = 32
//! max_grid_cells = 100000
//! request_timeout_secs = 30
//!
//! [datasets]
//! demo = "fixtures/demo/kestrel_gap.nc"
//! nightly = "/data/nightly/run_*.nc"
//! era = { path = "/data/era.nc", vars = { temperature = "air_temp" } }
//! ```
//!
//! Relative dataset paths are taken from the configuration file's folder. A path with glob
//! characters (`*`, `?`, `[`) names a series of files: the service serves the last match in
//! name order (date-stamped names sort by date) and moves to a newer one when it appears.
//! Every key is optional; unknown keys are refused, so a misspelt limit cannot pass unseen.

use std::collections::BTreeMap;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::time::Duration;

use serde::Deserialize;
use shearbox_cf::VarOverrides;
use thiserror::Error;

/// The demo dataset served when no dataset is given, relative to the working folder.
pub const DEMO_PATH: &str = "fixtures/demo/kestrel_gap.nc";

/// The command that makes the demo dataset.
pub const DEMO_COMMAND: &str = "target/release/shearbox-fixtures demo fixtures/demo";

/// Why a configuration was refused.
#[derive(Debug, Error)]
pub enum ConfigError {
    /// The configuration file could not be read.
    #[error("{}: cannot read the configuration file: {source}", file.display())]
    Read {
        /// The file.
        file: PathBuf,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The configuration file is not valid TOML or has unknown or mistyped keys.
    #[error("{}: {message}", file.display())]
    Parse {
        /// The file.
        file: PathBuf,
        /// The parser's message, with the line and column.
        message: String,
    },
    /// A value is out of its range or malformed.
    #[error("configuration key {key}: {reason}")]
    Invalid {
        /// The key, e.g. `limits.max_queue` or `datasets.demo`.
        key: String,
        /// What is wrong and what is accepted.
        reason: String,
    },
    /// No dataset was given and the demo dataset is missing.
    #[error(
        "no dataset given (--data NAME=PATH or --config FILE) and the demo dataset {DEMO_PATH} \
         does not exist; make it with `{DEMO_COMMAND}` (after `cargo build --release`), or run \
         scripts/serve, which does both"
    )]
    NoDemo,
}

/// Limits that keep the service up under load.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct Limits {
    /// Box queries computed at once (each runs on a blocking thread).
    pub max_concurrent: usize,
    /// Box queries that may wait for a slot; past that a request gets 503 with Retry-After.
    pub max_queue: usize,
    /// Cells a gridded layer answer may hold (after decimation); past that, 413.
    pub max_grid_cells: usize,
    /// Longest time a box query may take, seconds; past that, 503.
    pub request_timeout_secs: f64,
}

impl Default for Limits {
    fn default() -> Self {
        Self {
            max_concurrent: std::thread::available_parallelism().map_or(2, usize::from),
            max_queue: 64,
            max_grid_cells: 100_000,
            request_timeout_secs: 30.0,
        }
    }
}

/// One dataset: a file or a glob, and variable overrides for files the recogniser needs help
/// with.
#[derive(Debug, Clone, PartialEq)]
pub struct DatasetSpec {
    /// The file, or a glob of files (the last match in name order is served).
    pub path: PathBuf,
    /// Role → variable name (as `--var ROLE=NAME` on the command line).
    pub vars: BTreeMap<String, String>,
}

impl DatasetSpec {
    /// Whether the path is a glob.
    pub fn is_glob(&self) -> bool {
        self.path.to_string_lossy().contains(['*', '?', '['])
    }

    /// The variable overrides, parsed.
    pub fn overrides(&self) -> Result<VarOverrides, String> {
        let mut o = VarOverrides::default();
        for (role, name) in &self.vars {
            o.parse_arg(&format!("{role}={name}")).map_err(|e| e.to_string())?;
        }
        Ok(o)
    }
}

#[derive(Deserialize)]
#[serde(untagged)]
enum SpecRepr {
    Path(PathBuf),
    Full {
        path: PathBuf,
        #[serde(default)]
        vars: BTreeMap<String, String>,
    },
}

#[derive(Deserialize)]
#[serde(deny_unknown_fields)]
struct FileConfig {
    bind: Option<String>,
    cache_mb: Option<u64>,
    reload_interval_secs: Option<f64>,
    cache_max_age_secs: Option<u64>,
    equator_band_deg: Option<f64>,
    cors_origins: Option<Vec<String>>,
    tokens: Option<Vec<String>>,
    limits: Option<Limits>,
    datasets: Option<BTreeMap<String, SpecRepr>>,
}

/// The whole configuration of the service.
#[derive(Debug, Clone, PartialEq)]
pub struct ServeConfig {
    /// Address to listen on.
    pub bind: SocketAddr,
    /// Datasets by name.
    pub datasets: BTreeMap<String, DatasetSpec>,
    /// Size of the cache of decoded inputs and answers, MB.
    pub cache_mb: u64,
    /// How often each dataset's file or glob is checked for a new file.
    pub reload_interval: Duration,
    /// `Cache-Control: max-age` of answers, seconds.
    pub cache_max_age_secs: u64,
    /// Half-width of the equatorial band where balance-based quantities are masked, degrees.
    pub equator_band_deg: f64,
    /// Origins allowed to call the service from a browser (CORS); empty: none.
    pub cors_origins: Vec<String>,
    /// Bearer tokens accepted on `/v1/…`; empty: no authentication.
    pub tokens: Vec<String>,
    /// Limits.
    pub limits: Limits,
}

impl Default for ServeConfig {
    fn default() -> Self {
        Self {
            bind: SocketAddr::from(([127, 0, 0, 1], 8080)),
            datasets: BTreeMap::new(),
            cache_mb: 256,
            reload_interval: Duration::from_secs(10),
            cache_max_age_secs: 30,
            equator_band_deg: 5.0,
            cors_origins: Vec::new(),
            tokens: Vec::new(),
            limits: Limits::default(),
        }
    }
}

fn invalid(key: &str, reason: impl Into<String>) -> ConfigError {
    ConfigError::Invalid { key: key.to_string(), reason: reason.into() }
}

/// Parses a bind address such as `127.0.0.1:8080` or `[::1]:0`.
pub fn parse_bind(text: &str) -> Result<SocketAddr, ConfigError> {
    text.trim().parse().map_err(|_| {
        invalid("bind", format!("{text:?} is not an address; use HOST:PORT, e.g. 127.0.0.1:8080"))
    })
}

/// Whether `name` may name a dataset: 1 to 64 letters, digits, `_`, `-` or `.`, not starting
/// with `.`.
pub fn valid_dataset_name(name: &str) -> bool {
    (1..=64).contains(&name.len())
        && !name.starts_with('.')
        && name.chars().all(|c| c.is_ascii_alphanumeric() || matches!(c, '_' | '-' | '.'))
}

impl ServeConfig {
    /// Reads a TOML configuration file; relative dataset paths are taken from its folder.
    pub fn from_file(path: &Path) -> Result<Self, ConfigError> {
        let text = std::fs::read_to_string(path)
            .map_err(|source| ConfigError::Read { file: path.to_path_buf(), source })?;
        let base = path.parent().unwrap_or(Path::new(""));
        Self::from_toml(&text, base).map_err(|e| match e {
            ConfigError::Parse { message, .. } => {
                ConfigError::Parse { file: path.to_path_buf(), message }
            }
            other => other,
        })
    }

    /// Parses TOML text; relative dataset paths are joined to `base`.
    pub fn from_toml(text: &str, base: &Path) -> Result<Self, ConfigError> {
        let file: FileConfig = toml::from_str(text).map_err(|e| ConfigError::Parse {
            file: PathBuf::from("(configuration)"),
            message: e.to_string().trim().to_string(),
        })?;
        let mut cfg = ServeConfig::default();
        if let Some(bind) = file.bind {
            cfg.bind = parse_bind(&bind)?;
        }
        if let Some(mb) = file.cache_mb {
            cfg.cache_mb = mb;
        }
        if let Some(secs) = file.reload_interval_secs {
            if !(secs.is_finite() && secs > 0.0 && secs <= 86_400.0) {
                return Err(invalid("reload_interval_secs", "must be above 0 and at most 86400"));
            }
            cfg.reload_interval = Duration::from_secs_f64(secs);
        }
        if let Some(age) = file.cache_max_age_secs {
            cfg.cache_max_age_secs = age;
        }
        if let Some(band) = file.equator_band_deg {
            cfg.equator_band_deg = band;
        }
        cfg.cors_origins = file.cors_origins.unwrap_or_default();
        cfg.tokens = file.tokens.unwrap_or_default();
        if let Some(limits) = file.limits {
            cfg.limits = limits;
        }
        for (name, spec) in file.datasets.unwrap_or_default() {
            let (path, vars) = match spec {
                SpecRepr::Path(p) => (p, BTreeMap::new()),
                SpecRepr::Full { path, vars } => (path, vars),
            };
            cfg.add_dataset(&name, base.join(path), vars)?;
        }
        cfg.validate()?;
        Ok(cfg)
    }

    /// Adds a dataset given on the command line as `NAME=PATH_OR_GLOB`.
    pub fn add_data_arg(&mut self, arg: &str) -> Result<(), ConfigError> {
        let (name, path) = arg.split_once('=').ok_or_else(|| {
            invalid("--data", format!("{arg:?} is not NAME=PATH_OR_GLOB, e.g. demo=data/demo.nc"))
        })?;
        if path.is_empty() {
            return Err(invalid("--data", format!("{arg:?} gives no path")));
        }
        self.add_dataset(name.trim(), PathBuf::from(path), BTreeMap::new())
    }

    fn add_dataset(
        &mut self,
        name: &str,
        path: PathBuf,
        vars: BTreeMap<String, String>,
    ) -> Result<(), ConfigError> {
        let key = format!("datasets.{name}");
        if !valid_dataset_name(name) {
            return Err(invalid(
                &key,
                "a dataset name is 1 to 64 letters, digits, '_', '-' or '.', not starting \
                 with '.'",
            ));
        }
        if self.datasets.contains_key(name) {
            return Err(invalid(&key, "the name is given twice"));
        }
        let spec = DatasetSpec { path, vars };
        spec.overrides().map_err(|reason| invalid(&key, reason))?;
        self.datasets.insert(name.to_string(), spec);
        Ok(())
    }

    /// With no dataset given, serves the demo dataset, or says how to make it.
    pub fn or_demo(mut self) -> Result<Self, ConfigError> {
        if self.datasets.is_empty() {
            if !Path::new(DEMO_PATH).is_file() {
                return Err(ConfigError::NoDemo);
            }
            self.add_dataset("demo", PathBuf::from(DEMO_PATH), BTreeMap::new())?;
        }
        Ok(self)
    }

    /// Checks the ranges of every value.
    pub fn validate(&self) -> Result<(), ConfigError> {
        let l = &self.limits;
        if l.max_concurrent == 0 || l.max_concurrent > 1024 {
            return Err(invalid("limits.max_concurrent", "must be 1 to 1024"));
        }
        if l.max_queue > 100_000 {
            return Err(invalid("limits.max_queue", "must be at most 100000"));
        }
        if l.max_grid_cells == 0 {
            return Err(invalid("limits.max_grid_cells", "must be at least 1"));
        }
        if !(l.request_timeout_secs.is_finite()
            && l.request_timeout_secs > 0.0
            && l.request_timeout_secs <= 3600.0)
        {
            return Err(invalid("limits.request_timeout_secs", "must be above 0 and at most 3600"));
        }
        if !(self.equator_band_deg.is_finite() && (0.0..90.0).contains(&self.equator_band_deg)) {
            return Err(invalid("equator_band_deg", "must be from 0 to below 90 degrees"));
        }
        if let Some(t) = self.tokens.iter().find(|t| t.len() < 16) {
            return Err(invalid(
                "tokens",
                format!("a token of {} characters is too short; use at least 16", t.len()),
            ));
        }
        for origin in &self.cors_origins {
            if origin != "*" && !(origin.starts_with("http://") || origin.starts_with("https://")) {
                return Err(invalid(
                    "cors_origins",
                    format!("{origin:?} is not an origin such as https://dashboard.example.org"),
                ));
            }
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_key_is_read_and_relative_paths_follow_the_file() {
        let text = r#"
            bind = "0.0.0.0:9000"
            cache_mb = 64
            reload_interval_secs = 2.5
            cache_max_age_secs = 5
            equator_band_deg = 3
            cors_origins = ["https://dash.example.org"]
            tokens = ["0123456789abcdef"]
            [limits]
            max_concurrent = 3
            max_queue = 7
            max_grid_cells = 1000
            request_timeout_secs = 12
            [datasets]
            a = "data/a.nc"
            b = "/abs/run_*.nc"
            c = { path = "c.nc", vars = { temperature = "air_temp" } }
        "#;
        let cfg = ServeConfig::from_toml(text, Path::new("/etc/shearbox")).unwrap();
        assert_eq!(cfg.bind, "0.0.0.0:9000".parse().unwrap());
        assert_eq!(cfg.cache_mb, 64);
        assert_eq!(cfg.reload_interval, Duration::from_millis(2500));
        assert_eq!((cfg.cache_max_age_secs, cfg.equator_band_deg), (5, 3.0));
        assert_eq!(cfg.cors_origins, ["https://dash.example.org"]);
        assert_eq!(
            cfg.limits,
            Limits {
                max_concurrent: 3,
                max_queue: 7,
                max_grid_cells: 1000,
                request_timeout_secs: 12.0
            }
        );
        assert_eq!(cfg.datasets["a"].path, Path::new("/etc/shearbox/data/a.nc"));
        assert_eq!(cfg.datasets["b"].path, Path::new("/abs/run_*.nc"));
        assert!(cfg.datasets["b"].is_glob() && !cfg.datasets["a"].is_glob());
        assert_eq!(cfg.datasets["c"].vars["temperature"], "air_temp");
    }

    #[test]
    fn bad_configurations_are_refused_with_the_key() {
        let cases = [
            ("cache_size = 3", "unknown field `cache_size`"),
            ("[limits]\nmax_queu = 3", "unknown field `max_queu`"),
            ("bind = \"localhost\"", "HOST:PORT"),
            ("[limits]\nmax_concurrent = 0", "limits.max_concurrent"),
            ("[limits]\nmax_grid_cells = 0", "limits.max_grid_cells"),
            ("[limits]\nrequest_timeout_secs = -1", "limits.request_timeout_secs"),
            ("reload_interval_secs = 0", "reload_interval_secs"),
            ("equator_band_deg = 90", "equator_band_deg"),
            ("tokens = [\"short\"]", "too short"),
            ("cors_origins = [\"dash.example.org\"]", "not an origin"),
            ("[datasets]\n\"../x\" = \"x.nc\"", "datasets.../x"),
            ("[datasets]\nx = { path = \"x.nc\", vars = { colour = \"c\" } }", "datasets.x"),
        ];
        for (text, words) in cases {
            let err = ServeConfig::from_toml(text, Path::new("")).unwrap_err().to_string();
            assert!(err.contains(words), "{text:?}: {err}");
        }
    }

    #[test]
    fn data_arguments() {
        let mut cfg = ServeConfig::default();
        cfg.add_data_arg("demo=fixtures/x.nc").unwrap();
        assert_eq!(cfg.datasets["demo"].path, Path::new("fixtures/x.nc"));
        for bad in ["demo", "demo=", "=x.nc", "a b=x.nc", "demo=y.nc"] {
            assert!(cfg.add_data_arg(bad).is_err(), "{bad}");
        }
        assert_eq!(cfg.datasets.len(), 1);
        assert!(cfg.clone().or_demo().is_ok(), "datasets given: the demo is not looked for");
    }
}

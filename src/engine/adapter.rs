//! Adapters as data (filled in by the engine work).

use super::{Engine, Settings};

/// Load the adapter called `name` and apply `settings`.
pub fn load_engine(name: &str, _settings: &Settings) -> crate::Result<std::sync::Arc<dyn Engine>> {
    Err(crate::Error::invalid(format!(
        "no engine called '{name}' (adapters are not implemented yet)"
    )))
}

//! Adapters as data (filled in by the engine work).

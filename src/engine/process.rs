//! Spawning engine processes (filled in by the engine work).

//! Helpers for the cross-crate tests: locating the built binaries, spawning them, free ports.

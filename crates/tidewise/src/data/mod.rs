//! Data sources.

//! Unit tests of the ingest layer.

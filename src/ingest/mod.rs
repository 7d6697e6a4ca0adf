//! Placeholder: file formats.

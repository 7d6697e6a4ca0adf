//! Placeholder: drag of a sphere (being written).

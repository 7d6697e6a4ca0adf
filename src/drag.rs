//! Placeholder: drag of a sphere (filled in by the drag/water work).

//! Placeholder: water properties (filled in by the drag/water work).

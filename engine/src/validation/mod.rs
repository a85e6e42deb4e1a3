//! Built-in validation cases.

//! source (under construction)

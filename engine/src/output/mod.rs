//! output (under construction)

//! spectrum (under construction)

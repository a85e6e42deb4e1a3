//! transport (under construction)

//! score (under construction)

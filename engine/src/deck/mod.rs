//! deck (under construction)

//! physics (under construction)

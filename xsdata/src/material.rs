//! material (under construction)

//! library (under construction)

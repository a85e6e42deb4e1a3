//! formula (under construction)

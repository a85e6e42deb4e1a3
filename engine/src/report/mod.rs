//! report (under construction)

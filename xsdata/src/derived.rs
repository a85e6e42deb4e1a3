//! derived (under construction)

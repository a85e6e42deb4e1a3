//! rng (under construction)

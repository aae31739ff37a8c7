//! (module under construction)

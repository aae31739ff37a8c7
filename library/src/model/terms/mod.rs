//! Terms of a regression: planned once from the specification and the data
//! ([`recipe`]), then evaluated on any table with the same columns
//! ([`design`]) — the fitted data or new rows for prediction.

pub mod design;
pub mod groups;
pub mod recipe;

pub use design::design_matrix;
pub use groups::{GroupLayout, GroupTerm};
pub use recipe::{plan_terms, TermRecipe};

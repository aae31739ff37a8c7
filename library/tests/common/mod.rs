//! Helpers shared by several integration tests (each test file that uses
//! them declares `mod common;`).

pub mod cells;
pub mod linear_sem;
pub mod sbc;
pub mod scratch;
pub mod seeded;
pub mod text_boxes;

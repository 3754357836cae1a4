//! Presentation: reads a [`crate::analysis::report::Report`] and formats it.
//! Nothing here measures anything.

pub mod csv;
pub mod json;
pub mod text;

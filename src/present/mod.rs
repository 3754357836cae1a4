//! Presentation: reads a [`crate::analysis::report::Report`] and formats it.
//! Nothing here measures anything.

pub mod csv;
pub mod html;
pub mod json;
pub mod plots;
pub mod text;
pub mod txrx_text;
pub mod view_args;

//! Types for the site and line registry.

use dispar_core::site::{Line, Site};

/// What an upsert did.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Upserted {
    /// The row did not exist and was created.
    Created,
    /// The row existed with other values and was updated.
    Updated,
    /// The row existed with the same values; nothing was written.
    Unchanged,
}

/// A site with its registered lines (ordered by line code).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SiteWithLines {
    /// The site.
    pub site: Site,
    /// Its lines, ordered by code.
    pub lines: Vec<Line>,
}

//! The site-and-hop network.
pub mod graph;
pub mod hops;
pub mod profile;
pub mod sites;

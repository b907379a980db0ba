//! Generators of heterogeneous terrain: spatially correlated random fields.

pub mod random_field;

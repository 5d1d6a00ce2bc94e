//! Bond valence: parameter tables, valence check of a structure, oxidation-state assignment, and
//! the resolved landscape model of a probe ion.

//! Structure files in: CIF (through [`crate::cif`]), VASP POSCAR/CONTCAR, extended XYZ.

pub mod cif;
pub mod poscar;
pub mod xyz;

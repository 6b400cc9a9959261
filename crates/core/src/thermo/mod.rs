//! Thermodynamic data and properties: species polynomials, reactions, K(T) sources
//! and the Peng–Robinson equation of state. Pure: no I/O, no clock, no runtime.

pub mod ksource;
pub mod peng_robinson;
pub mod reaction;
pub mod species;

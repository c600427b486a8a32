//! The file boundary: reading a user's file once into memory and into positioned cells
//! ([`input`], [`sheet`]), and writing a run's outputs as one unit ([`output`]). Nothing here interprets
//! the contents.

pub mod demo;
pub mod input;
pub mod output;
pub mod sheet;

//! Sutura's front ends: the command line ([`cli`]) and the workstation window ([`gui`]), both
//! over the core library [`sutura_core`], which holds all the science and every shared rule.

pub mod cli;
pub mod gui;

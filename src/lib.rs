//! reweave repairs damaged pixels in raster images by solving Laplace's equation over the damage.
//!
//! The pieces, in the order a repair flows through them:
//! - [`raster`] loads an image, remembering how it was stored, and saves it back the same way;
//! - [`mask`] says which pixels are damaged;
//! - [`fill`] solves for the damaged pixels from the known ones around them;
//! - [`report`] records what was done;
//! - [`cli`] is the command line on top.
//!
//! Filled pixels are estimates, not measurements.

pub mod cli;
pub mod detect;
pub mod fill;
pub mod gui;
pub mod mask;
pub mod raster;
pub mod report;
pub mod synth;

//! The integration test binary. Each module is one area:
//! - `architecture`: the layering invariants (a pure numerical core) and the source conventions;
//! - `cli`: the `trapwise` binary end to end (calibrate, simulate, bad input, exit codes).

// Test code states tolerances as written (a * se + b), not as fused multiply-adds.
#![allow(clippy::suboptimal_flops)]

mod architecture;
mod cli;

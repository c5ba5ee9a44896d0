//! Monte Carlo refits from synthetic noise around the base fit.

//! Bootstrap resampling (case, residual, wild) with refits from the base fit.

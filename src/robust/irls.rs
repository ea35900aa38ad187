//! Iteratively reweighted least squares for M-estimates with a fixed scale (MM) and Huber's joint
//! location-scale fixed point.

//! Scale estimators: MAD about zero and the bisquare M-scale.

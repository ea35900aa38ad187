//! Huber's (1981) sandwich covariance with small-sample correction.

//! knotwise: partially linear additive models with B-spline smooth terms, fitted classically and
//! robustly from a declarative study spec, with a reproducible report.

pub mod analysis;
pub mod app;
pub mod basis;
pub mod cli;
pub mod compare;
pub mod data;
pub mod design;
pub mod dist;
pub mod error;
pub mod fit;
pub mod init;
pub mod linalg;
pub mod outputs;
pub mod provenance;
pub mod report;
pub mod results;
pub mod robust;
pub mod select;
pub mod sensitivity;
pub mod spec;
pub mod termination;

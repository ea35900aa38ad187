//! knotwise: partially linear additive models with B-spline smooth terms, fitted classically and
//! robustly from a declarative study spec, with a reproducible report.

pub mod basis;
pub mod data;
pub mod dist;
pub mod error;
pub mod linalg;
pub mod robust;
pub mod spec;
pub mod termination;
pub mod design;
pub mod fit;
pub mod select;
pub mod sensitivity;
pub mod analysis;
pub mod outputs;
pub mod provenance;
pub mod results;
pub mod app;
pub mod cli;
pub mod compare;
pub mod init;
pub mod report;

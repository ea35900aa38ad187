//! Loss functions for M-estimation: one trait, least squares, Huber and bisquare, and tuning constants
//! solved from a requested normal efficiency.

/// A loss ρ with its derivative ψ, weight ψ(z)/z and ψ'.
pub trait Loss: Sync {
    fn name(&self) -> &'static str;
    /// The tuning constant (Huber k, bisquare c; 0 for least squares).
    fn tuning(&self) -> f64;
    fn rho(&self, z: f64) -> f64;
    fn psi(&self, z: f64) -> f64;
    /// ψ(z)/z, with the limit at z = 0.
    fn weight(&self, z: f64) -> f64;
    fn psi_prime(&self, z: f64) -> f64;
    fn is_bounded(&self) -> bool;
    /// sup ρ (infinite for unbounded losses).
    fn rho_max(&self) -> f64;
}

// Placeholder items (replaced by the robust module's implementation).
pub struct Bisquare {
    pub c: f64,
}
pub struct Huber {
    pub k: f64,
}
macro_rules! placeholder_loss {
    ($t:ty) => {
        impl Loss for $t {
            fn name(&self) -> &'static str {
                todo!()
            }
            fn tuning(&self) -> f64 {
                todo!()
            }
            fn rho(&self, _z: f64) -> f64 {
                todo!()
            }
            fn psi(&self, _z: f64) -> f64 {
                todo!()
            }
            fn weight(&self, _z: f64) -> f64 {
                todo!()
            }
            fn psi_prime(&self, _z: f64) -> f64 {
                todo!()
            }
            fn is_bounded(&self) -> bool {
                todo!()
            }
            fn rho_max(&self) -> f64 {
                todo!()
            }
        }
    };
}
placeholder_loss!(Bisquare);
placeholder_loss!(Huber);
pub fn bisquare_tuning(_e: f64) -> f64 {
    todo!()
}
pub fn huber_tuning(_e: f64) -> f64 {
    todo!()
}

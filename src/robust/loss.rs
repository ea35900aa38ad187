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

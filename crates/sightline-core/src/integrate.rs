//! Fixed-step integration of continuous-time plants, generic over the scalar so that AD flows
//! through it: classical RK4 ([`rk4`]) and the selectable [`Integrator`] that continuous-time
//! plants name in [`crate::Model::integrator`].

use nalgebra::allocator::Allocator;
use nalgebra::{DefaultAllocator, Dim, OVector};

use crate::real::Real;

/// Integrates `dx/dt = f(t, x)` from `t0` over `dt` with `substeps` classical fourth-order
/// Runge–Kutta steps (Butcher tableau 1/6, 1/3, 1/3, 1/6; e.g. Hairer, Nørsett & Wanner,
/// *Solving Ordinary Differential Equations I*, §II.1).
///
/// Generic over the scalar, so a plant's transition built on it can be differentiated exactly
/// (the Jacobian is that of the discrete RK4 map, not of the exact flow). `substeps` of 0 counts
/// as 1.
///
/// ```
/// use sightline_core::nalgebra::Vector1;
/// use sightline_core::rk4;
/// // dx/dt = -x from 1 over one second in 20 steps of h = 0.05. Each RK4 step multiplies by
/// // the stability polynomial R(z) = 1 + z + z²/2 + z³/6 + z⁴/24 at z = -h (closed form), and
/// // the result is within RK4's O(h⁴) global error (2.0e-8 here) of exp(-1).
/// let x = rk4(|_t, x: &Vector1<f64>| -x, &Vector1::new(1.0), 0.0, 1.0, 20);
/// let z = -0.05f64;
/// let r = 1.0 + z + z * z / 2.0 + z.powi(3) / 6.0 + z.powi(4) / 24.0;
/// assert!((x[0] - r.powi(20)).abs() < 1e-15);
/// assert!((x[0] - (-1.0f64).exp()).abs() < 3e-8);
/// ```
// Inlined so that a constant `substeps` (one step, the default) folds into the caller and the
// right-hand side inlines into the stages.
#[inline]
pub fn rk4<S, N, F>(f: F, x: &OVector<S, N>, t0: f64, dt: f64, substeps: usize) -> OVector<S, N>
where
    S: Real,
    N: Dim,
    F: Fn(f64, &OVector<S, N>) -> OVector<S, N>,
    DefaultAllocator: Allocator<N>,
{
    let steps = substeps.max(1);
    let h = dt / steps as f64;
    let half = S::from(h / 2.0);
    let full = S::from(h);
    let sixth = S::from(h / 6.0);
    let mut x = x.clone();
    for i in 0..steps {
        let t = t0 + i as f64 * h;
        let k1 = f(t, &x);
        let k2 = f(t + h / 2.0, &(&x + &k1 * half));
        let k3 = f(t + h / 2.0, &(&x + &k2 * half));
        let k4 = f(t + h, &(&x + &k3 * full));
        x += (k1 + (k2 + k3) * S::from(2.0) + k4) * sixth;
    }
    x
}

/// How a continuous-time plant's right-hand side is integrated over one step of `dt`.
///
/// Every method takes `substeps` equal steps of `dt / substeps` (0 counts as 1). The transition
/// is then the exact derivative-carrying map of those steps, so the extended filters
/// differentiate what the other filters evaluate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Integrator {
    /// Classical fourth-order Runge–Kutta ([`rk4`]); global error O(h⁴).
    Rk4 {
        /// Equal steps per sample.
        substeps: usize,
    },
    /// Heun's second-order method (explicit trapezoid: Hairer, Nørsett & Wanner, §II.1);
    /// global error O(h²), two evaluations per step.
    Heun {
        /// Equal steps per sample.
        substeps: usize,
    },
    /// Forward Euler; global error O(h), one evaluation per step.
    Euler {
        /// Equal steps per sample.
        substeps: usize,
    },
}

impl Default for Integrator {
    /// One RK4 step per sample.
    #[inline]
    fn default() -> Self {
        Integrator::Rk4 { substeps: 1 }
    }
}

impl Integrator {
    /// Integrates `dx/dt = f(t, x)` from `t0` over `dt`.
    ///
    /// ```
    /// use sightline_core::nalgebra::Vector1;
    /// use sightline_core::Integrator;
    /// // dx/dt = −x from 1 over 1 s: each method's one-step factor raised to the number of
    /// // steps (closed forms: Euler 1 + z, Heun 1 + z + z²/2, z = −h).
    /// let f = |_t: f64, x: &Vector1<f64>| -x;
    /// let x0 = Vector1::new(1.0);
    /// let euler = Integrator::Euler { substeps: 10 }.integrate(f, &x0, 0.0, 1.0);
    /// let heun = Integrator::Heun { substeps: 10 }.integrate(f, &x0, 0.0, 1.0);
    /// assert!((euler[0] - 0.9f64.powi(10)).abs() < 1e-15);
    /// assert!((heun[0] - 0.905f64.powi(10)).abs() < 1e-15);
    /// ```
    #[inline]
    pub fn integrate<S, N, F>(self, f: F, x: &OVector<S, N>, t0: f64, dt: f64) -> OVector<S, N>
    where
        S: Real,
        N: Dim,
        F: Fn(f64, &OVector<S, N>) -> OVector<S, N>,
        DefaultAllocator: Allocator<N>,
    {
        // A small dispatch so that it inlines into the transition and the right-hand side
        // inlines into the chosen method (one body per method keeps the RK4 path as fast as a
        // direct call to `rk4`).
        match self {
            Integrator::Rk4 { substeps } => rk4(f, x, t0, dt, substeps),
            Integrator::Heun { substeps } => heun(f, x, t0, dt, substeps),
            Integrator::Euler { substeps } => euler(f, x, t0, dt, substeps),
        }
    }
}

/// `substeps` equal steps of `one(t, h, x)` (the one-step map of a method) over `dt` from `t0`.
fn fixed_steps<S, N>(
    x: &OVector<S, N>,
    t0: f64,
    dt: f64,
    substeps: usize,
    one: impl Fn(f64, f64, &OVector<S, N>) -> OVector<S, N>,
) -> OVector<S, N>
where
    S: Real,
    N: Dim,
    DefaultAllocator: Allocator<N>,
{
    let steps = substeps.max(1);
    let h = dt / steps as f64;
    let mut x = x.clone();
    for i in 0..steps {
        x = one(t0 + i as f64 * h, h, &x);
    }
    x
}

/// Heun's method over `dt` in `substeps` steps (see [`Integrator::Heun`]).
fn heun<S, N, F>(f: F, x: &OVector<S, N>, t0: f64, dt: f64, substeps: usize) -> OVector<S, N>
where
    S: Real,
    N: Dim,
    F: Fn(f64, &OVector<S, N>) -> OVector<S, N>,
    DefaultAllocator: Allocator<N>,
{
    fixed_steps(x, t0, dt, substeps, |t, h, x| {
        let k1 = f(t, x);
        let k2 = f(t + h, &(x + &k1 * S::from(h)));
        x + (k1 + k2) * S::from(h / 2.0)
    })
}

/// Forward Euler over `dt` in `substeps` steps (see [`Integrator::Euler`]).
fn euler<S, N, F>(f: F, x: &OVector<S, N>, t0: f64, dt: f64, substeps: usize) -> OVector<S, N>
where
    S: Real,
    N: Dim,
    F: Fn(f64, &OVector<S, N>) -> OVector<S, N>,
    DefaultAllocator: Allocator<N>,
{
    fixed_steps(x, t0, dt, substeps, |t, h, x| x + f(t, x) * S::from(h))
}

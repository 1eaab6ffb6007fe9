//! FIRE, the fast inertial relaxation engine: E. Bitzek, P. Koskinen, F. Gähler, M. Moseler,
//! P. Gumbsch, Phys. Rev. Lett. 97, 170201 (2006). Unit masses; the parameters N_min = 5,
//! f_inc = 1.1, f_dec = 0.5, α_start = 0.1, f_α = 0.99 are those of the paper.
//!
//! Works on any force (it needs no energy), which is why it suits nudged elastic bands, whose
//! projected forces are not the gradient of any function.

use nalgebra::DVector;

/// FIRE settings. `dt` is in the time unit of unit-mass dynamics, so a step is about F·dt².
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct FireOptions {
    pub dt_start: f64,
    pub dt_max: f64,
    /// Largest displacement of one atom (3 components) in one step (bohr or surface units).
    pub max_atom_step: f64,
}

/// FIRE state for one vector of coordinates.
#[derive(Debug, Clone)]
pub struct Fire {
    opts: FireOptions,
    v: DVector<f64>,
    dt: f64,
    alpha: f64,
    n_positive: usize,
}

const N_MIN: usize = 5;
const F_INC: f64 = 1.1;
const F_DEC: f64 = 0.5;
const ALPHA_START: f64 = 0.1;
const F_ALPHA: f64 = 0.99;

impl Fire {
    pub fn new(n: usize, opts: FireOptions) -> Self {
        Fire {
            opts,
            v: DVector::zeros(n),
            dt: opts.dt_start,
            alpha: ALPHA_START,
            n_positive: 0,
        }
    }

    /// Forget the velocity (after the force field changed, e.g. climbing switched on).
    pub fn reset_velocity(&mut self) {
        self.v.fill(0.0);
        self.alpha = ALPHA_START;
        self.n_positive = 0;
    }

    /// One FIRE step: the displacement to add to the coordinates, given the force (−gradient).
    pub fn step(&mut self, force: &DVector<f64>) -> DVector<f64> {
        let p = force.dot(&self.v);
        if p > 0.0 {
            let fnorm = force.norm();
            if fnorm > 0.0 {
                let vnorm = self.v.norm();
                self.v = &self.v * (1.0 - self.alpha) + force * (self.alpha * vnorm / fnorm);
            }
            self.n_positive += 1;
            if self.n_positive > N_MIN {
                self.dt = (self.dt * F_INC).min(self.opts.dt_max);
                self.alpha *= F_ALPHA;
            }
        } else {
            self.v.fill(0.0);
            self.dt *= F_DEC;
            self.alpha = ALPHA_START;
            self.n_positive = 0;
        }
        self.v += force * self.dt;
        let mut dx = &self.v * self.dt;
        // Cap the largest per-atom displacement.
        let mut largest = 0.0_f64;
        for a in 0..dx.len() / 3 {
            let d = (dx[3 * a].powi(2) + dx[3 * a + 1].powi(2) + dx[3 * a + 2].powi(2)).sqrt();
            largest = largest.max(d);
        }
        if largest > self.opts.max_atom_step {
            // Limit the velocity with the step, so momentum built on a steep wall cannot carry
            // the coordinates far past it.
            let s = self.opts.max_atom_step / largest;
            dx *= s;
            self.v *= s;
        }
        dx
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // A stiff anisotropic quadratic: FIRE reaches the minimum (0, 0, 0).
    #[test]
    fn relaxes_a_quadratic() {
        let k = [1.0, 10.0, 0.3];
        let mut x = DVector::from_vec(vec![1.0, -0.5, 2.0]);
        let mut f = Fire::new(
            3,
            FireOptions {
                dt_start: 0.1,
                dt_max: 0.5,
                max_atom_step: 0.2,
            },
        );
        for _ in 0..500 {
            let force = DVector::from_iterator(3, (0..3).map(|i| -k[i] * x[i]));
            if force.norm() < 1e-8 {
                break;
            }
            x += f.step(&force);
        }
        assert!(x.norm() < 1e-6, "{x}");
    }
}

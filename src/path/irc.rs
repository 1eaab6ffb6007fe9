//! Intrinsic reaction coordinate: the steepest-descent path in mass-weighted coordinates
//! (K. Fukui, Acc. Chem. Res. 14, 363 (1981)) from a first-order saddle down both sides.
//!
//! Integrator: the local quadratic approximation (LQA) of M. Page and J. W. McIver,
//! J. Chem. Phys. 88, 922 (1988): at each point the gradient g and Hessian H (mass-weighted,
//! eigenpairs λ_i, u_i) define the path Δq(t) = Σ_i (e^{−λ_i t} − 1)/λ_i (u_i·g) u_i, and t is
//! chosen so that the arc length ∫|dq/dt| dt equals the step. The Hessian is computed at the
//! saddle and then updated with J. M. Bofill's formula (J. Comput. Chem. 15, 1 (1994)) from
//! successive gradients, or recomputed every `hessian_every` steps.
//!
//! Both directions are integrated side by side: every request holds the next point of each
//! running branch (one batch). The first step leaves the saddle along ± the eigenvector of the
//! negative Hessian eigenvalue. A branch stops when the energy would rise (that point is
//! dropped), when the largest Cartesian gradient component falls below `gtol`, when the
//! quadratic model's minimum is closer than one step (the last step goes there), or at its step
//! budget. Arc lengths are in amu^½ bohr (surface units on a model surface, unit masses).
//! Each end is then minimised ([`crate::algo::minimize::Minimizer`], both ends in one batch)
//! unless `minimize_ends` is off.

use super::max_abs;
use crate::algo::minimize::{MinOptions, MinVerdict, Minimizer};
use crate::algo::{AlgoError, Algorithm, Step};
use crate::eval::{Answer, Point, Quantity};
use crate::geom::{self, Frame};
use nalgebra::{DMatrix, DVector};
use serde::{Deserialize, Serialize};

/// Settings of the IRC.
#[derive(Debug, Clone, PartialEq)]
pub struct IrcOptions {
    /// Arc length per step, amu^½ bohr.
    pub step: f64,
    /// Step budget per direction.
    pub max_steps: usize,
    /// Recompute the Hessian every this many steps (0: only at the saddle, then updates).
    pub hessian_every: usize,
    /// Stop a branch when the largest Cartesian gradient component is below this, Eh/bohr.
    pub gtol: f64,
    /// Minimise each end after the path stops (default true).
    pub minimize_ends: bool,
    pub min: MinOptions,
}

impl IrcOptions {
    pub fn molecule() -> Self {
        IrcOptions {
            step: 0.1,
            max_steps: 150,
            hessian_every: 0,
            gtol: 5e-4,
            minimize_ends: true,
            min: MinOptions::default(),
        }
    }
    /// Model surfaces: analytic Hessians are cheap, so recompute them at every step.
    pub fn surface() -> Self {
        IrcOptions {
            step: 0.01,
            max_steps: 1000,
            hessian_every: 1,
            gtol: 0.05,
            minimize_ends: true,
            min: MinOptions::for_surface(),
        }
    }
    pub fn for_frame(frame: Frame) -> Self {
        match frame {
            Frame::Molecule => Self::molecule(),
            Frame::Surface => Self::surface(),
        }
    }
}

/// One point of an IRC branch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IrcPoint {
    /// Cartesian coordinates, bohr.
    pub x: DVector<f64>,
    /// Eh.
    pub energy: f64,
    /// Arc length from the saddle, amu^½ bohr.
    pub arc: f64,
}

/// One direction of the IRC.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IrcBranch {
    /// From the first point after the saddle outward.
    pub points: Vec<IrcPoint>,
    /// Why the branch stopped.
    pub reason: String,
    /// False when the branch only ran out of steps.
    pub reached_minimum: bool,
    /// The end after the final minimisation (None when it was not asked for).
    pub minimum: Option<EndMinimum>,
}

/// The minimised end of a branch.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EndMinimum {
    pub x: DVector<f64>,
    pub energy: f64,
    pub converged: bool,
    pub reason: String,
    /// Mass-weighted distance from the last path point, amu^½ bohr.
    pub distance: f64,
}

impl IrcBranch {
    /// The last point (the end of the branch before any final minimisation).
    pub fn end(&self) -> Option<&IrcPoint> {
        self.points.last()
    }
    /// The end geometry: the minimised one when there is one, else the last path point.
    pub fn end_geometry(&self) -> Option<&DVector<f64>> {
        self.minimum
            .as_ref()
            .map(|m| &m.x)
            .or_else(|| self.points.last().map(|p| &p.x))
    }
    /// Arc length from the saddle to the end, amu^½ bohr.
    pub fn arc_length(&self) -> f64 {
        self.points.last().map_or(0.0, |p| p.arc)
    }
}

/// The IRC's verdict.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct IrcResult {
    pub saddle: DVector<f64>,
    pub saddle_energy: f64,
    /// Negative eigenvalue of the mass-weighted Hessian at the saddle, Eh/(bohr² amu).
    pub saddle_eigenvalue: f64,
    /// Unit transition vector at the saddle (mass-weighted coordinates).
    pub transition_vector: DVector<f64>,
    /// Along +transition vector.
    pub forward: IrcBranch,
    /// Along −transition vector.
    pub reverse: IrcBranch,
    pub gradient_evaluations: usize,
    pub hessian_evaluations: usize,
}

#[derive(Debug, Clone)]
struct Branch {
    /// Mass-weighted coordinates of the last accepted point.
    q: DVector<f64>,
    g: DVector<f64>,
    energy: f64,
    h: DMatrix<f64>,
    arc: f64,
    /// The point asked for now (mass-weighted) and its arc length.
    pending: Option<(DVector<f64>, f64)>,
    /// The pending point is the quadratic model's minimum: stop after it.
    last: bool,
    steps: usize,
    points: Vec<IrcPoint>,
    stopped: Option<(String, bool)>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Phase {
    Start,
    Saddle,
    Running,
    Minimizing,
    Done,
}

/// A final minimisation of one branch end.
#[derive(Debug, Clone)]
struct EndMin {
    branch: usize,
    algo: Minimizer,
    asked: usize,
    verdict: Option<MinVerdict>,
}

/// IRC from a saddle, both directions, as an ask/tell algorithm.
#[derive(Debug, Clone)]
pub struct Irc {
    opts: IrcOptions,
    frame: Frame,
    /// √m per coordinate (3N).
    sqrt_m: DVector<f64>,
    masses: Vec<f64>,
    x0: DVector<f64>,
    e0: f64,
    eig0: f64,
    v0: DVector<f64>,
    branches: Vec<Branch>,
    phase: Phase,
    grads: usize,
    hessians: usize,
    /// Per request: (branch, wants Hessian too).
    asked: Vec<(usize, bool)>,
    mins: Vec<EndMin>,
}

/// (e^{−λt} − 1)/λ, with its limit −t for λt → 0.
fn phi(lambda: f64, t: f64) -> f64 {
    let z = lambda * t;
    if z.abs() < 1e-8 {
        -t * (1.0 - 0.5 * z)
    } else {
        (-z).exp_m1() / lambda
    }
}

/// Arc length of the LQA path from t = 0 to `t` (composite Simpson).
fn lqa_arc(lam: &[f64], gc: &[f64], t: f64) -> f64 {
    let n = 200;
    let h = t / n as f64;
    let speed = |tt: f64| {
        lam.iter()
            .zip(gc)
            .map(|(l, g)| (g * (-l * tt).exp()).powi(2))
            .sum::<f64>()
            .sqrt()
    };
    let mut s = speed(0.0) + speed(t);
    for k in 1..n {
        s += speed(k as f64 * h) * if k % 2 == 1 { 4.0 } else { 2.0 };
    }
    s * h / 3.0
}

/// One LQA step of arc length `step` from gradient `g` with Hessian `h` (mass-weighted).
/// Returns the displacement, its arc length and whether it is the quadratic model's minimum.
pub fn lqa_step(g: &DVector<f64>, h: &DMatrix<f64>, step: f64) -> (DVector<f64>, f64, bool) {
    let eig = h.clone().symmetric_eigen();
    let lam: Vec<f64> = eig.eigenvalues.iter().copied().collect();
    let gc: Vec<f64> = (0..lam.len())
        .map(|i| eig.eigenvectors.column(i).dot(g))
        .collect();
    let gn = g.norm();
    let disp = |t: f64| {
        let mut d = DVector::zeros(g.len());
        for i in 0..lam.len() {
            d += eig.eigenvectors.column(i) * (gc[i] * phi(lam[i], t));
        }
        d
    };
    if gn == 0.0 {
        return (DVector::zeros(g.len()), 0.0, true);
    }
    // The model has a minimum only if every mode with a gradient component curves upward.
    let bounded = lam
        .iter()
        .zip(&gc)
        .all(|(l, c)| *l > 1e-10 || c.abs() < 1e-14 * gn);
    let mut hi = step / gn;
    let mut s_hi = lqa_arc(&lam, &gc, hi);
    let lmin_pos = lam
        .iter()
        .zip(&gc)
        .filter(|(_, c)| c.abs() >= 1e-14 * gn)
        .map(|(l, _)| *l)
        .fold(f64::INFINITY, f64::min);
    while s_hi < step {
        hi *= 2.0;
        if bounded && lmin_pos * hi > 40.0 {
            // The whole remaining model path is shorter than one step: go to its minimum.
            let mut d = DVector::zeros(g.len());
            for i in 0..lam.len() {
                if lam[i] > 1e-10 {
                    d -= eig.eigenvectors.column(i) * (gc[i] / lam[i]);
                }
            }
            let s_inf = lqa_arc(&lam, &gc, hi);
            return (d, s_inf, true);
        }
        s_hi = lqa_arc(&lam, &gc, hi);
    }
    let mut lo = 0.0;
    for _ in 0..60 {
        let mid = 0.5 * (lo + hi);
        if lqa_arc(&lam, &gc, mid) < step {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    let t = 0.5 * (lo + hi);
    (disp(t), step, false)
}

/// Bofill's update of a Hessian from a step `s` and gradient change `y`.
pub fn bofill_update(h: &mut DMatrix<f64>, s: &DVector<f64>, y: &DVector<f64>) {
    let xi = y - &*h * s;
    let ss = s.dot(s);
    let xs = xi.dot(s);
    let xx = xi.dot(&xi);
    if ss < 1e-20 || xx < 1e-30 {
        return;
    }
    let phi = if xx * ss > 0.0 {
        xs * xs / (xx * ss)
    } else {
        0.0
    };
    let psb =
        (&xi * s.transpose() + s * xi.transpose()) / ss - (s * s.transpose()) * (xs / (ss * ss));
    let mut upd = psb * (1.0 - phi);
    if xs.abs() > 1e-14 {
        upd += (&xi * xi.transpose()) * (phi / xs);
    }
    *h += upd;
}

impl Irc {
    /// `masses`: one per atom, amu (unit masses for model surfaces).
    pub fn new(
        saddle: DVector<f64>,
        masses: &[f64],
        frame: Frame,
        opts: IrcOptions,
    ) -> Result<Self, AlgoError> {
        let n = saddle.len();
        if n == 0 || n != 3 * masses.len() {
            return Err(AlgoError(format!(
                "IRC: {} coordinates for {} atoms",
                n,
                masses.len()
            )));
        }
        if masses.iter().any(|m| m.is_nan() || *m <= 0.0) {
            return Err(AlgoError("IRC: every atom needs a positive mass".into()));
        }
        let sqrt_m = DVector::from_iterator(n, (0..n).map(|i| masses[i / 3].sqrt()));
        Ok(Irc {
            opts,
            frame,
            sqrt_m,
            masses: masses.to_vec(),
            x0: saddle,
            e0: f64::NAN,
            eig0: f64::NAN,
            v0: DVector::zeros(n),
            branches: Vec::new(),
            phase: Phase::Start,
            grads: 0,
            hessians: 0,
            asked: Vec::new(),
            mins: Vec::new(),
        })
    }

    fn to_q(&self, x: &DVector<f64>) -> DVector<f64> {
        x.component_mul(&self.sqrt_m)
    }
    fn to_x(&self, q: &DVector<f64>) -> DVector<f64> {
        q.component_div(&self.sqrt_m)
    }
    /// Mass-weighted external projector at Cartesian geometry x.
    fn projector(&self, x: &DVector<f64>) -> DMatrix<f64> {
        geom::complement_projector(&geom::external_basis(x, Some(&self.masses), self.frame))
    }
    fn mw_hessian(&self, hx: &DMatrix<f64>, x: &DVector<f64>) -> DMatrix<f64> {
        let n = hx.nrows();
        let mut h = DMatrix::zeros(n, n);
        for i in 0..n {
            for j in 0..n {
                h[(i, j)] = 0.5 * (hx[(i, j)] + hx[(j, i)]) / (self.sqrt_m[i] * self.sqrt_m[j]);
            }
        }
        let p = self.projector(x);
        &p * h * &p
    }

    fn request(&mut self) -> Step<IrcResult> {
        let mut pts = Vec::new();
        self.asked.clear();
        let every = self.opts.hessian_every;
        for (b, br) in self.branches.iter().enumerate() {
            if br.stopped.is_some() {
                continue;
            }
            if let Some((q, _)) = &br.pending {
                let x = q.component_div(&self.sqrt_m);
                let want_h = every > 0 && (br.steps + 1) % every == 0;
                pts.push(Point::new(x.clone(), Quantity::Gradient));
                if want_h {
                    pts.push(Point::new(x, Quantity::Hessian));
                }
                self.asked.push((b, want_h));
            }
        }
        if pts.is_empty() {
            return self.start_minimizing();
        }
        Step::Evaluate(pts)
    }

    fn start_minimizing(&mut self) -> Step<IrcResult> {
        if !self.opts.minimize_ends {
            self.phase = Phase::Done;
            return Step::Done(self.verdict());
        }
        self.mins = self
            .branches
            .iter()
            .enumerate()
            .map(|(b, br)| {
                let x = br
                    .points
                    .last()
                    .map_or_else(|| self.x0.clone(), |p| p.x.clone());
                EndMin {
                    branch: b,
                    algo: Minimizer::new(x, self.frame, self.opts.min.clone()),
                    asked: 0,
                    verdict: None,
                }
            })
            .collect();
        self.phase = Phase::Minimizing;
        match self.step_minimizers(Vec::new()) {
            Ok(s) => s,
            Err(e) => {
                // Cannot happen on the first call (no answers); keep the path regardless.
                self.phase = Phase::Done;
                let mut v = self.verdict();
                v.forward
                    .reason
                    .push_str(&format!("; final minimisation failed: {}", e.0));
                Step::Done(v)
            }
        }
    }

    /// Hand each running minimiser its share of the answers; gather their next requests.
    fn step_minimizers(&mut self, answers: Vec<Answer>) -> Result<Step<IrcResult>, AlgoError> {
        let expected: usize = self.mins.iter().map(|m| m.asked).sum();
        if answers.len() != expected {
            return Err(AlgoError(format!(
                "IRC end minimisation: expected {expected} answers, got {}",
                answers.len()
            )));
        }
        let mut it = answers.into_iter();
        let mut pts = Vec::new();
        for m in self.mins.iter_mut() {
            if m.verdict.is_some() {
                continue;
            }
            let mine: Vec<Answer> = it.by_ref().take(m.asked).collect();
            self.grads += mine.len();
            let name = if m.branch == 0 { "forward" } else { "reverse" };
            match m
                .algo
                .step(mine)
                .map_err(|e| AlgoError(format!("IRC {name} end minimisation: {}", e.0)))?
            {
                Step::Evaluate(p) => {
                    m.asked = p.len();
                    pts.extend(p);
                }
                Step::Done(v) => {
                    m.asked = 0;
                    m.verdict = Some(v);
                }
            }
        }
        if pts.is_empty() {
            self.phase = Phase::Done;
            return Ok(Step::Done(self.verdict()));
        }
        Ok(Step::Evaluate(pts))
    }

    fn verdict(&self) -> IrcResult {
        let minimum = |k: usize| {
            let m = self.mins.iter().find(|m| m.branch == k)?;
            let v = m.verdict.as_ref()?;
            let last = self.branches[k].points.last().map_or(&self.x0, |p| &p.x);
            Some(EndMinimum {
                x: v.x.clone(),
                energy: v.energy,
                converged: v.converged,
                reason: v.reason.clone(),
                distance: (&v.x - last).component_mul(&self.sqrt_m).norm(),
            })
        };
        let branch = |b: &Branch| IrcBranch {
            points: b.points.clone(),
            reason: b
                .stopped
                .as_ref()
                .map(|s| s.0.clone())
                .unwrap_or_else(|| "not finished".into()),
            reached_minimum: b.stopped.as_ref().is_some_and(|s| s.1),
            minimum: None,
        };
        let mut forward = branch(&self.branches[0]);
        forward.minimum = minimum(0);
        let mut reverse = branch(&self.branches[1]);
        reverse.minimum = minimum(1);
        IrcResult {
            saddle: self.x0.clone(),
            saddle_energy: self.e0,
            saddle_eigenvalue: self.eig0,
            transition_vector: self.v0.clone(),
            forward,
            reverse,
            gradient_evaluations: self.grads,
            hessian_evaluations: self.hessians,
        }
    }

    /// Take the answer for branch b's pending point; decide to stop or plan the next step.
    fn advance(&mut self, b: usize, energy: f64, gx: DVector<f64>, hx: Option<DMatrix<f64>>) {
        let opts = self.opts.clone();
        let Some((q_new, arc_new)) = self.branches[b].pending.take() else {
            return;
        };
        let x_new = self.to_x(&q_new);
        let name = if b == 0 { "forward" } else { "reverse" };
        let steps = self.branches[b].steps + 1;
        if energy > self.branches[b].energy {
            self.branches[b].stopped = Some((
                format!(
                    "{name}: stopped after {} steps: the energy rose at the next point (the minimum lies between)",
                    steps - 1
                ),
                true,
            ));
            return;
        }
        let p = self.projector(&x_new);
        let gq = &p * gx.component_div(&self.sqrt_m);
        let gcart = geom::project_vector(&gx, &x_new, self.frame);
        {
            let br = &mut self.branches[b];
            let s = &q_new - &br.q;
            let y = &gq - &br.g;
            if br.steps > 0 || br.g.norm() > 0.0 {
                bofill_update(&mut br.h, &s, &y);
            }
            br.q = q_new.clone();
            br.g = gq.clone();
            br.energy = energy;
            br.arc = arc_new;
            br.steps = steps;
            br.points.push(IrcPoint {
                x: x_new.clone(),
                energy,
                arc: arc_new,
            });
        }
        if let Some(hx) = hx {
            let h = self.mw_hessian(&hx, &x_new);
            self.branches[b].h = h;
        }
        let gmax = max_abs(&gcart);
        let br = &mut self.branches[b];
        if br.last {
            br.stopped = Some((
                format!(
                    "{name}: reached the minimum of the local quadratic model after {steps} steps"
                ),
                true,
            ));
            return;
        }
        if gmax < opts.gtol {
            br.stopped = Some((
                format!(
                    "{name}: gradient below tolerance after {steps} steps ({gmax:.2e} < {:.2e})",
                    opts.gtol
                ),
                true,
            ));
            return;
        }
        if steps >= opts.max_steps {
            br.stopped = Some((
                format!(
                    "{name}: step budget of {} steps used up before a minimum (largest gradient component {gmax:.2e}); the end is not a minimum",
                    opts.max_steps
                ),
                false,
            ));
            return;
        }
        let h = (&p * &br.h * &p + (&p * &br.h * &p).transpose()) * 0.5;
        let (dq, ds, last) = lqa_step(&gq, &h, opts.step);
        let dq = &p * dq;
        br.pending = Some((&br.q + dq, br.arc + ds));
        br.last = last;
    }
}

impl Algorithm for Irc {
    type Verdict = IrcResult;

    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<IrcResult>, AlgoError> {
        let n = self.x0.len();
        match self.phase {
            Phase::Start => {
                self.phase = Phase::Saddle;
                Ok(Step::Evaluate(vec![Point::new(
                    self.x0.clone(),
                    Quantity::Hessian,
                )]))
            }
            Phase::Saddle => {
                let a = answers
                    .into_iter()
                    .next()
                    .ok_or_else(|| AlgoError("IRC: no answer for the saddle Hessian".into()))?;
                a.validate(Quantity::Hessian, n)
                    .map_err(|e| AlgoError(format!("IRC, Hessian at the saddle: {e}")))?;
                self.hessians += 1;
                let hx = a.hessian.unwrap_or_else(|| DMatrix::zeros(n, n));
                let h = self.mw_hessian(&hx, &self.x0);
                let eig = h.clone().symmetric_eigen();
                let (imin, lmin) =
                    eig.eigenvalues
                        .iter()
                        .enumerate()
                        .fold(
                            (0, f64::INFINITY),
                            |acc, (i, &l)| if l < acc.1 { (i, l) } else { acc },
                        );
                if lmin.is_nan() || lmin >= 0.0 {
                    return Err(AlgoError(format!(
                        "IRC: the starting geometry has no negative curvature (lowest mass-weighted Hessian eigenvalue {lmin:.3e} Eh/(bohr² amu)); it is not a saddle: refine it first"
                    )));
                }
                let mut v = eig.eigenvectors.column(imin).clone_owned();
                let imax = v.iamax();
                if v[imax] < 0.0 {
                    v = -v;
                }
                self.e0 = a.energy;
                self.eig0 = lmin;
                self.v0 = v.clone();
                let q0 = self.to_q(&self.x0);
                for sign in [1.0, -1.0] {
                    self.branches.push(Branch {
                        q: q0.clone(),
                        g: DVector::zeros(n),
                        energy: a.energy,
                        h: h.clone(),
                        arc: 0.0,
                        pending: Some((&q0 + &v * (sign * self.opts.step), self.opts.step)),
                        last: false,
                        steps: 0,
                        points: Vec::new(),
                        stopped: None,
                    });
                }
                self.phase = Phase::Running;
                Ok(self.request())
            }
            Phase::Running => {
                let expected: usize = self.asked.iter().map(|(_, h)| 1 + usize::from(*h)).sum();
                if answers.len() != expected {
                    return Err(AlgoError(format!(
                        "IRC: expected {expected} answers, got {}",
                        answers.len()
                    )));
                }
                let mut it = answers.into_iter();
                for (b, want_h) in self.asked.clone() {
                    let what = if b == 0 { "forward" } else { "reverse" };
                    let a = it
                        .next()
                        .ok_or_else(|| AlgoError("IRC: answer missing".into()))?;
                    a.validate(Quantity::Gradient, n).map_err(|e| {
                        AlgoError(format!(
                            "IRC {what}, step {}: {e}",
                            self.branches[b].steps + 1
                        ))
                    })?;
                    self.grads += 1;
                    let hx = if want_h {
                        let ah = it
                            .next()
                            .ok_or_else(|| AlgoError("IRC: answer missing".into()))?;
                        ah.validate(Quantity::Hessian, n).map_err(|e| {
                            AlgoError(format!(
                                "IRC {what}, Hessian at step {}: {e}",
                                self.branches[b].steps + 1
                            ))
                        })?;
                        self.hessians += 1;
                        ah.hessian
                    } else {
                        None
                    };
                    let g = a.gradient.unwrap_or_else(|| DVector::zeros(n));
                    self.advance(b, a.energy, g, hx);
                }
                Ok(self.request())
            }
            Phase::Minimizing => self.step_minimizers(answers),
            Phase::Done => Err(AlgoError("IRC: step called after the verdict".into())),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    // On an exact quadratic the LQA path is exact: a long step lands on the minimum.
    #[test]
    fn lqa_reaches_the_minimum_of_a_quadratic() {
        let h = DMatrix::from_row_slice(2, 2, &[2.0, 0.3, 0.3, 0.5]);
        let x = DVector::from_vec(vec![0.4, -0.7]);
        let g = &h * &x;
        let (d, s, last) = lqa_step(&g, &h, 10.0);
        assert!(last);
        assert!((x + d).norm() < 1e-9);
        assert!(s > 0.8 && s < 10.0);
        // A short step has the asked arc length and goes downhill.
        let x = DVector::from_vec(vec![0.4, -0.7]);
        let (d, s, last) = lqa_step(&g, &h, 0.05);
        assert!(!last && (s - 0.05).abs() < 1e-12);
        assert!((d.norm() - 0.05).abs() < 2e-3 && d.dot(&g) < 0.0);
        let _ = x;
    }

    // Bofill's update reproduces a quadratic's Hessian along the step (secant condition).
    #[test]
    fn bofill_satisfies_the_secant_condition() {
        let mut h = DMatrix::identity(3, 3);
        let s = DVector::from_vec(vec![0.1, -0.2, 0.05]);
        let y = DVector::from_vec(vec![-0.3, 0.1, 0.2]);
        bofill_update(&mut h, &s, &y);
        assert!((&h * &s - &y).norm() < 1e-12);
        assert!((&h - h.transpose()).norm() < 1e-12);
    }
}

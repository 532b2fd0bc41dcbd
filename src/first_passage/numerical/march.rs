//! The Crank–Nicolson march of [`super::solve`], on plain numbers with forward sensitivities.
//!
//! On the grid the operator of the module docs is L(t) = c(t)·A + ℓ(t)·B + σ(t)·C: three fixed
//! stencils, (Ax)ᵢ = xᵢ₋₁ − 2xᵢ + xᵢ₊₁, (Bx)ᵢ = (xᵢ₋₁ − xᵢ₊₁)/(2Δz) and
//! (Cx)ᵢ = (zᵢ₊₁xᵢ₊₁ − zᵢ₋₁xᵢ₋₁)/(2Δz) (x = 0 on the bounds), weighted by three numbers of the
//! time, c = 1/(2S²Δz²), ℓ = v/S and σ = λ + S′/S. A step solves
//! (I − θΔt·L₁)·q₁ = (I + (1 − θ)Δt·L₀)·q₀. Its derivative in a parameter ξ is the forward
//! sensitivity q′ = ∂q/∂ξ (Griewank & Walther 2008, forward mode applied to the step):
//!
//! ```text
//! (I − θΔt·L₁)·q₁′ = (I + (1 − θ)Δt·L₀)·q₀′ + (1 − θ)Δt·L₀′·q₀ + θΔt·L₁′·q₁,  L′ = c′A + ℓ′B + σ′C,
//! ```
//!
//! the same tridiagonal matrix as the density's, factored once per step (Thomas algorithm) for
//! the density and every sensitivity. This is the derivative of the discretised solution on its
//! grid, the same numbers as dual numbers carried through every grid point, but only the three
//! weights of each time carry derivatives; the vector work is on plain numbers and only in the
//! directions in which the process's parameters carry derivatives.

use super::partials::Partials;
use super::{Process, Solution};

/// The operator L at one time: its weights with their partial derivatives, and its
/// tridiagonal coefficients, (Lx)ᵢ = αᵢxᵢ₋₁ + βxᵢ + γᵢxᵢ₊₁.
struct Operator {
    weights: [f64; 3],
    /// ∂(c, ℓ, σ) in each carried direction, three numbers per direction.
    partials: Vec<f64>,
    alpha: Vec<f64>,
    beta: f64,
    gamma: Vec<f64>,
}

/// The three stencils A, B, C applied to one vector.
struct Stencils {
    a: Vec<f64>,
    b: Vec<f64>,
    c: Vec<f64>,
}

/// The points' coordinates: zs[j] = z_{j−1}, from −1 (the lower bound) to 1 (the upper).
struct Points {
    zs: Vec<f64>,
    /// 1/(2Δz).
    half_inverse: f64,
}

impl Points {
    fn stencils(&self, x: &[f64], out: &mut Stencils) {
        let m = x.len();
        for (i, &centre) in x.iter().enumerate() {
            let left = if i > 0 { x[i - 1] } else { 0.0 };
            let right = if i + 1 < m { x[i + 1] } else { 0.0 };
            out.a[i] = left - 2.0 * centre + right;
            out.b[i] = (left - right) * self.half_inverse;
            out.c[i] = (self.zs[i + 2] * right - self.zs[i] * left) * self.half_inverse;
        }
    }
}

impl Operator {
    fn new(m: usize, directions: usize) -> Operator {
        Operator {
            weights: [0.0; 3],
            partials: vec![0.0; 3 * directions],
            alpha: vec![0.0; m],
            beta: 0.0,
            gamma: vec![0.0; m],
        }
    }

    /// Fills the operator at time t; false when the bounds have met (S(t) ≤ 0).
    fn fill<N: Partials>(
        &mut self,
        process: &Process<N>,
        t: f64,
        points: &Points,
        directions: &[usize],
    ) -> bool {
        let (s, ds) = process.half_width(N::from(t));
        if s.re() <= 0.0 {
            return false;
        }
        let inverse = s.recip();
        let dz = 1.0 / (2.0 * points.half_inverse);
        let weights = [
            inverse * inverse * (0.5 / (dz * dz)),
            process.drift * inverse,
            process.leak + ds * inverse,
        ];
        for (k, &d) in directions.iter().enumerate() {
            for (w, weight) in weights.iter().enumerate() {
                self.partials[3 * k + w] = weight.partial(d);
            }
        }
        let [centre, level, slope] = weights.map(|w| w.re());
        self.weights = [centre, level, slope];
        self.beta = -2.0 * centre;
        let h = points.half_inverse;
        for i in 0..self.alpha.len() {
            self.alpha[i] = centre + (level - slope * points.zs[i]) * h;
            self.gamma[i] = centre - (level - slope * points.zs[i + 2]) * h;
        }
        true
    }
}

/// I − w·L factored by the Thomas algorithm, for any number of right-hand sides.
struct Factored {
    lower: Vec<f64>,
    inverse: Vec<f64>,
    upper: Vec<f64>,
}

impl Factored {
    fn new(m: usize) -> Factored {
        Factored {
            lower: vec![0.0; m],
            inverse: vec![0.0; m],
            upper: vec![0.0; m],
        }
    }

    fn factor(&mut self, op: &Operator, w: f64) {
        let diag = 1.0 - w * op.beta;
        let mut previous_upper = 0.0;
        for i in 0..op.alpha.len() {
            self.lower[i] = -w * op.alpha[i];
            let pivot = diag - self.lower[i] * previous_upper;
            self.inverse[i] = pivot.recip();
            self.upper[i] = -w * op.gamma[i] * self.inverse[i];
            previous_upper = self.upper[i];
        }
    }

    /// Solves in place for the right-hand sides `r[j·W + k]`, k < W.
    fn solve<const W: usize>(&self, r: &mut [f64]) {
        let rows: &mut [[f64; W]] = rows_of(r);
        let mut previous = [0.0; W];
        for ((row, &lower), &inverse) in rows.iter_mut().zip(&self.lower).zip(&self.inverse) {
            for k in 0..W {
                row[k] = (row[k] - lower * previous[k]) * inverse;
            }
            previous = *row;
        }
        let mut following = [0.0; W];
        for (row, &upper) in rows.iter_mut().zip(&self.upper).rev() {
            for k in 0..W {
                row[k] -= upper * following[k];
            }
            following = *row;
        }
    }
}

/// The rows of W numbers of an interleaved vector.
fn rows_of<const W: usize>(r: &mut [f64]) -> &mut [[f64; W]] {
    let (rows, rest) = r.as_chunks_mut::<W>();
    debug_assert!(rest.is_empty());
    rows
}

/// One step's sensitivity equations (module docs): the operators and stencils at both ends.
struct Sensitivities<'a> {
    now: &'a Operator,
    next: &'a Operator,
    old: &'a Stencils,
    new: &'a Stencils,
    explicit: f64,
    implicit: f64,
}

impl Sensitivities<'_> {
    /// The sensitivities `dq` (W per point, W ≥ 1) one step on, into `out`.
    fn step<const W: usize>(&self, factored: &Factored, dq: &[f64], out: &mut [f64]) {
        let (dq, _) = dq.as_chunks::<W>();
        let rows: &mut [[f64; W]] = rows_of(out);
        let (explicit, implicit) = (self.explicit, self.implicit);
        let mut by_old = [[0.0; 3]; W];
        let mut by_new = [[0.0; 3]; W];
        for k in 0..W {
            for w in 0..3 {
                by_old[k][w] = explicit * self.now.partials[3 * k + w];
                by_new[k][w] = implicit * self.next.partials[3 * k + w];
            }
        }
        let (old, new, now) = (self.old, self.new, self.now);
        let m = rows.len();
        let centre = 1.0 + explicit * now.beta;
        for (i, row) in rows.iter_mut().enumerate() {
            let left = if i > 0 { dq[i - 1] } else { [0.0; W] };
            let right = if i + 1 < m { dq[i + 1] } else { [0.0; W] };
            let (a, c) = (explicit * now.alpha[i], explicit * now.gamma[i]);
            let (oa, ob, oc) = (old.a[i], old.b[i], old.c[i]);
            let (na, nb, nc) = (new.a[i], new.b[i], new.c[i]);
            for k in 0..W {
                row[k] = a * left[k]
                    + centre * dq[i][k]
                    + c * right[k]
                    + by_old[k][0] * oa
                    + by_old[k][1] * ob
                    + by_old[k][2] * oc
                    + by_new[k][0] * na
                    + by_new[k][1] * nb
                    + by_new[k][2] * nc;
            }
        }
        factored.solve::<W>(out);
    }
}

/// The march's fixed numbers: the process, its carried directions, the grid's points and the
/// step rule's inputs.
pub(super) struct March<'a, N> {
    pub process: &'a Process<N>,
    pub directions: Vec<usize>,
    pub points: usize,
    pub horizon: f64,
    /// The next step from the current time.
    pub step: &'a dyn Fn(f64) -> f64,
}

impl<N: Partials> March<'_, N> {
    /// Marches the initial density `initial` (at `solution`'s first time, on the points) to the
    /// horizon, pushing the currents and the interior mass at every grid time.
    pub fn run(&self, initial: &[N], solution: &mut Solution<N>) {
        let m = self.points;
        let width = self.directions.len();
        let dz = 2.0 / (m + 1) as f64;
        let points = Points {
            zs: (0..m + 2).map(|j| -1.0 + dz * j as f64).collect(),
            half_inverse: 1.0 / (2.0 * dz),
        };
        let mut q: Vec<f64> = initial.iter().map(|x| x.re()).collect();
        let mut dq: Vec<f64> = initial
            .iter()
            .flat_map(|x| self.directions.iter().map(move |&d| x.partial(d)))
            .collect();
        let mut now = Operator::new(m, width);
        let mut next = Operator::new(m, width);
        let mut factored = Factored::new(m);
        let blank = || Stencils {
            a: vec![0.0; m],
            b: vec![0.0; m],
            c: vec![0.0; m],
        };
        let (mut old, mut new) = (blank(), blank());
        let mut rhs = vec![0.0; m];
        let mut sensitivity_rhs = vec![0.0; m * width];
        let mut partials = vec![0.0; width];
        let zero = N::from(0.0);
        let mut t = solution.times[0];
        if !now.fill(self.process, t, &points, &self.directions) {
            return;
        }
        points.stencils(&q, &mut old);
        let mut step_index = 0;
        while t < self.horizon * (1.0 - 1e-12) {
            let dt = (self.step)(t);
            let next_t = t + dt;
            if !next.fill(self.process, next_t, &points, &self.directions) {
                // The bounds have met: every process has ended.
                solution.push(next_t, zero, zero, zero);
                break;
            }
            let theta = if step_index < super::DAMPING_STEPS {
                1.0
            } else {
                0.5
            };
            let (explicit, implicit) = ((1.0 - theta) * dt, theta * dt);
            let [c0, l0, s0] = now.weights;
            for i in 0..m {
                rhs[i] = q[i] + explicit * (c0 * old.a[i] + l0 * old.b[i] + s0 * old.c[i]);
            }
            factored.factor(&next, implicit);
            factored.solve::<1>(&mut rhs);
            points.stencils(&rhs, &mut new);
            let sensitivities = Sensitivities {
                now: &now,
                next: &next,
                old: &old,
                new: &new,
                explicit,
                implicit,
            };
            match width {
                0 => {}
                1 => sensitivities.step::<1>(&factored, &dq, &mut sensitivity_rhs),
                2 => sensitivities.step::<2>(&factored, &dq, &mut sensitivity_rhs),
                3 => sensitivities.step::<3>(&factored, &dq, &mut sensitivity_rhs),
                4 => sensitivities.step::<4>(&factored, &dq, &mut sensitivity_rhs),
                5 => sensitivities.step::<5>(&factored, &dq, &mut sensitivity_rhs),
                6 => sensitivities.step::<6>(&factored, &dq, &mut sensitivity_rhs),
                7 => sensitivities.step::<7>(&factored, &dq, &mut sensitivity_rhs),
                _ => sensitivities.step::<8>(&factored, &dq, &mut sensitivity_rhs),
            }
            std::mem::swap(&mut q, &mut rhs);
            std::mem::swap(&mut dq, &mut sensitivity_rhs);
            std::mem::swap(&mut old, &mut new);
            std::mem::swap(&mut now, &mut next);
            // Currents through the bounds: ∂q/∂z at z = ±1 from q(±1) = 0 and the two nearest
            // points, times 1/(2S²).
            let (s, _) = self.process.half_width(N::from(next_t));
            let inverse = s.recip();
            let scale = inverse * inverse * (0.5 / (2.0 * dz));
            let mut current = |a: usize, b: usize| {
                for (k, x) in partials.iter_mut().enumerate() {
                    *x = 4.0 * dq[a * width + k] - dq[b * width + k];
                }
                N::assemble(4.0 * q[a] - q[b], &self.directions, &partials) * scale
            };
            let upper = current(m - 1, m - 2);
            let lower = current(0, 1);
            for (k, x) in partials.iter_mut().enumerate() {
                *x = (0..m).map(|i| dq[i * width + k]).sum::<f64>() * dz;
            }
            let mass = N::assemble(q.iter().sum::<f64>() * dz, &self.directions, &partials);
            solution.push(next_t, upper, lower, mass);
            t = next_t;
            step_index += 1;
        }
    }
}

//! Algorithms as pure state machines (ask/tell).
//!
//! An algorithm is plain data. The driver calls [`Algorithm::step`] with the answers to the
//! points the algorithm asked for last time (an empty vector on the first call), in the same
//! order, and gets back either more points to evaluate ([`Step::Evaluate`], one batch, evaluated
//! in parallel) or a verdict ([`Step::Done`]). No I/O and no async happen inside an algorithm,
//! so every algorithm can be tested on analytic surfaces and replayed from the store.

pub mod common;
pub mod freq;
pub mod hessian;
pub mod minimize;
pub mod saddle;

use crate::eval::{Answer, Point};

/// What an algorithm answers with.
#[derive(Debug, Clone)]
pub enum Step<V> {
    /// Evaluate all these points (one batch; order of answers = order of points).
    Evaluate(Vec<Point>),
    /// Finished, with a verdict.
    Done(V),
}

/// An error that stops an algorithm (e.g. a NaN in a Hessian, wrong number of answers).
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
#[error("{0}")]
pub struct AlgoError(pub String);

/// The ask/tell interface every algorithm shares.
pub trait Algorithm {
    type Verdict;
    /// Take the answers to the previous request and say what to do next.
    fn step(&mut self, answers: Vec<Answer>) -> Result<Step<Self::Verdict>, AlgoError>;
}

/// Run an algorithm to its verdict with an in-process evaluation function (used by tests and by
/// built-in model surfaces). Returns the verdict and the number of points evaluated.
pub fn run_sync<A: Algorithm>(
    algo: &mut A,
    mut eval: impl FnMut(&Point) -> Answer,
    max_rounds: usize,
) -> Result<(A::Verdict, usize), AlgoError> {
    let mut answers = Vec::new();
    let mut count = 0;
    for _ in 0..max_rounds {
        match algo.step(std::mem::take(&mut answers))? {
            Step::Done(v) => return Ok((v, count)),
            Step::Evaluate(points) => {
                count += points.len();
                answers = points.iter().map(&mut eval).collect();
            }
        }
    }
    Err(AlgoError(format!(
        "no verdict after {max_rounds} rounds of evaluations"
    )))
}

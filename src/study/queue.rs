//! A pure ready-queue over a dependency graph (petgraph): which tasks can run now.
//!
//! `add` tasks with their dependencies (earlier tasks only, so the graph is acyclic by
//! construction), `finish_adding`, then repeatedly take `next_ready` and report `complete` (which
//! returns the tasks that just became ready) or `fail` (which returns the tasks that can no
//! longer run). Among ready tasks the one with the most expensive path to the end goes first
//! (critical-path priority), ties broken by insertion order. No I/O, no clocks.

use petgraph::graph::{DiGraph, NodeIndex};
use petgraph::Direction;
use std::collections::BinaryHeap;

/// Where a task is in its life.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum TaskState {
    /// Waiting for dependencies.
    Waiting,
    /// All dependencies done; not yet handed out.
    Ready,
    /// Handed out by `next_ready`.
    Running,
    Done,
    Failed,
    /// A dependency failed, so this will not run.
    Blocked,
}

/// Errors of use (bugs in the caller), never of user input.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum QueueError {
    #[error("task {0} does not exist")]
    NoSuchTask(usize),
    #[error("tasks cannot be added after finish_adding")]
    Finished,
    #[error("finish_adding has not been called")]
    NotFinished,
    #[error("task {0} is {1:?}, not running")]
    NotRunning(usize, TaskState),
}

#[derive(Debug, Clone)]
struct Entry<T> {
    item: T,
    cost: u64,
    /// Cost of the most expensive path from this task to the end, itself included.
    priority: u64,
    state: TaskState,
    waiting_on: usize,
}

/// The queue. `T` is whatever the caller wants to attach to a task.
#[derive(Debug, Clone)]
pub struct ReadyQueue<T> {
    graph: DiGraph<Entry<T>, ()>,
    heap: BinaryHeap<(u64, std::cmp::Reverse<usize>)>,
    finished: bool,
}

impl<T> Default for ReadyQueue<T> {
    fn default() -> Self {
        Self::new()
    }
}

impl<T> ReadyQueue<T> {
    pub fn new() -> Self {
        ReadyQueue {
            graph: DiGraph::new(),
            heap: BinaryHeap::new(),
            finished: false,
        }
    }

    /// Add a task with its cost (any unit, used for priorities) and the tasks it needs.
    pub fn add(&mut self, item: T, cost: u64, deps: &[NodeIndex]) -> Result<NodeIndex, QueueError> {
        if self.finished {
            return Err(QueueError::Finished);
        }
        if let Some(d) = deps.iter().find(|d| d.index() >= self.graph.node_count()) {
            return Err(QueueError::NoSuchTask(d.index()));
        }
        let n = self.graph.add_node(Entry {
            item,
            cost,
            priority: cost,
            state: TaskState::Waiting,
            waiting_on: 0,
        });
        let mut unique: Vec<NodeIndex> = deps.to_vec();
        unique.sort();
        unique.dedup();
        for d in &unique {
            self.graph.add_edge(*d, n, ());
        }
        self.graph[n].waiting_on = unique.len();
        Ok(n)
    }

    /// No more tasks: compute priorities and mark the tasks without dependencies ready.
    pub fn finish_adding(&mut self) {
        if self.finished {
            return;
        }
        self.finished = true;
        // Tasks only depend on earlier tasks, so reverse insertion order is a reverse
        // topological order.
        for i in (0..self.graph.node_count()).rev() {
            let n = NodeIndex::new(i);
            let tail = self
                .graph
                .neighbors_directed(n, Direction::Outgoing)
                .map(|m| self.graph[m].priority)
                .max()
                .unwrap_or(0);
            let e = &mut self.graph[n];
            e.priority = e.cost.saturating_add(tail);
        }
        for i in 0..self.graph.node_count() {
            let n = NodeIndex::new(i);
            if self.graph[n].waiting_on == 0 {
                self.make_ready(n);
            }
        }
    }

    fn make_ready(&mut self, n: NodeIndex) {
        let e = &mut self.graph[n];
        e.state = TaskState::Ready;
        self.heap.push((e.priority, std::cmp::Reverse(n.index())));
    }

    /// The most urgent ready task, now marked running; None when nothing is ready.
    pub fn next_ready(&mut self) -> Option<NodeIndex> {
        if !self.finished {
            return None;
        }
        while let Some((_, std::cmp::Reverse(i))) = self.heap.pop() {
            let n = NodeIndex::new(i);
            if self.graph[n].state == TaskState::Ready {
                self.graph[n].state = TaskState::Running;
                return Some(n);
            }
        }
        None
    }

    /// A running task finished; returns the tasks that became ready because of it.
    pub fn complete(&mut self, n: NodeIndex) -> Result<Vec<NodeIndex>, QueueError> {
        self.check_running(n)?;
        self.graph[n].state = TaskState::Done;
        let mut newly = Vec::new();
        let next: Vec<NodeIndex> = self
            .graph
            .neighbors_directed(n, Direction::Outgoing)
            .collect();
        for m in next {
            let e = &mut self.graph[m];
            e.waiting_on = e.waiting_on.saturating_sub(1);
            if e.waiting_on == 0 && e.state == TaskState::Waiting {
                self.make_ready(m);
                newly.push(m);
            }
        }
        newly.sort();
        Ok(newly)
    }

    /// A running task failed; returns every task that now cannot run (all that depend on it,
    /// directly or not), marked blocked.
    pub fn fail(&mut self, n: NodeIndex) -> Result<Vec<NodeIndex>, QueueError> {
        self.check_running(n)?;
        self.graph[n].state = TaskState::Failed;
        let mut blocked = Vec::new();
        let mut stack: Vec<NodeIndex> = self
            .graph
            .neighbors_directed(n, Direction::Outgoing)
            .collect();
        while let Some(m) = stack.pop() {
            if matches!(self.graph[m].state, TaskState::Waiting | TaskState::Ready) {
                self.graph[m].state = TaskState::Blocked;
                blocked.push(m);
                stack.extend(self.graph.neighbors_directed(m, Direction::Outgoing));
            }
        }
        blocked.sort();
        Ok(blocked)
    }

    fn check_running(&self, n: NodeIndex) -> Result<(), QueueError> {
        if !self.finished {
            return Err(QueueError::NotFinished);
        }
        match self.graph.node_weight(n) {
            None => Err(QueueError::NoSuchTask(n.index())),
            Some(e) if e.state != TaskState::Running => {
                Err(QueueError::NotRunning(n.index(), e.state))
            }
            Some(_) => Ok(()),
        }
    }

    pub fn state(&self, n: NodeIndex) -> Option<TaskState> {
        self.graph.node_weight(n).map(|e| e.state)
    }
    pub fn item(&self, n: NodeIndex) -> Option<&T> {
        self.graph.node_weight(n).map(|e| &e.item)
    }
    pub fn priority(&self, n: NodeIndex) -> Option<u64> {
        self.graph.node_weight(n).map(|e| e.priority)
    }
    pub fn len(&self) -> usize {
        self.graph.node_count()
    }
    pub fn is_empty(&self) -> bool {
        self.graph.node_count() == 0
    }
    /// Tasks this task needs.
    pub fn dependencies(&self, n: NodeIndex) -> Vec<NodeIndex> {
        let mut v: Vec<NodeIndex> = self
            .graph
            .neighbors_directed(n, Direction::Incoming)
            .collect();
        v.sort();
        v
    }
    /// True when no task is waiting, ready or running.
    pub fn is_finished(&self) -> bool {
        self.graph.node_weights().all(|e| {
            matches!(
                e.state,
                TaskState::Done | TaskState::Failed | TaskState::Blocked
            )
        })
    }
    /// Count of tasks in each state.
    pub fn count(&self, s: TaskState) -> usize {
        self.graph.node_weights().filter(|e| e.state == s).count()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// a → c, b → c, c → d; a and b share nothing.
    fn diamond() -> (ReadyQueue<&'static str>, [NodeIndex; 4]) {
        let mut q = ReadyQueue::new();
        let a = q.add("a", 1, &[]).unwrap();
        let b = q.add("b", 5, &[]).unwrap();
        let c = q.add("c", 1, &[a, b]).unwrap();
        let d = q.add("d", 1, &[c]).unwrap();
        q.finish_adding();
        (q, [a, b, c, d])
    }

    #[test]
    fn runs_in_dependency_order_with_critical_path_first() {
        let (mut q, [a, b, c, d]) = diamond();
        assert_eq!(q.priority(b), Some(7));
        assert_eq!(q.priority(a), Some(3));
        // b has the longer path to the end, so it goes first.
        assert_eq!(q.next_ready(), Some(b));
        assert_eq!(q.next_ready(), Some(a));
        assert_eq!(q.next_ready(), None);
        assert_eq!(q.complete(b).unwrap(), vec![]);
        assert_eq!(q.state(c), Some(TaskState::Waiting));
        assert_eq!(q.complete(a).unwrap(), vec![c]);
        assert_eq!(q.next_ready(), Some(c));
        assert_eq!(q.complete(c).unwrap(), vec![d]);
        assert!(!q.is_finished());
        assert_eq!(q.next_ready(), Some(d));
        assert_eq!(q.complete(d).unwrap(), vec![]);
        assert!(q.is_finished());
        assert_eq!(q.count(TaskState::Done), 4);
    }

    #[test]
    fn failure_blocks_everything_downstream_only() {
        let mut q = ReadyQueue::new();
        let a = q.add(0, 1, &[]).unwrap();
        let b = q.add(1, 1, &[a]).unwrap();
        let c = q.add(2, 1, &[b]).unwrap();
        let other = q.add(3, 1, &[]).unwrap();
        q.finish_adding();
        let first = q.next_ready().unwrap();
        assert_eq!(first, a);
        assert_eq!(q.fail(a).unwrap(), vec![b, c]);
        assert_eq!(q.state(c), Some(TaskState::Blocked));
        assert_eq!(q.next_ready(), Some(other));
        q.complete(other).unwrap();
        assert!(q.is_finished());
        assert_eq!(q.next_ready(), None);
    }

    #[test]
    fn misuse_is_an_error_not_a_panic() {
        let mut q = ReadyQueue::new();
        let a = q.add((), 1, &[]).unwrap();
        assert_eq!(
            q.add((), 1, &[NodeIndex::new(7)]),
            Err(QueueError::NoSuchTask(7))
        );
        assert_eq!(
            q.next_ready(),
            None,
            "nothing is handed out before finish_adding"
        );
        assert_eq!(q.complete(a), Err(QueueError::NotFinished));
        q.finish_adding();
        assert!(matches!(
            q.complete(a),
            Err(QueueError::NotRunning(0, TaskState::Ready))
        ));
        assert_eq!(q.add((), 1, &[]), Err(QueueError::Finished));
        let n = q.next_ready().unwrap();
        q.complete(n).unwrap();
        assert!(q.complete(n).is_err(), "completing twice is refused");
    }

    #[test]
    fn duplicate_dependencies_count_once() {
        let mut q = ReadyQueue::new();
        let a = q.add((), 1, &[]).unwrap();
        let b = q.add((), 1, &[a, a]).unwrap();
        q.finish_adding();
        let n = q.next_ready().unwrap();
        assert_eq!(q.complete(n).unwrap(), vec![b]);
    }

    #[test]
    fn every_task_runs_exactly_once_in_a_random_dag() {
        use rand::{Rng, SeedableRng};
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(7);
        for _ in 0..50 {
            let mut q = ReadyQueue::new();
            let n = rng.gen_range(1..40);
            for i in 0..n {
                let deps: Vec<NodeIndex> = (0..i)
                    .filter(|_| rng.gen_bool(0.15))
                    .map(NodeIndex::new)
                    .collect();
                q.add(i, rng.gen_range(1..10), &deps).unwrap();
            }
            q.finish_adding();
            let mut order = Vec::new();
            let mut running = Vec::new();
            loop {
                while let Some(t) = q.next_ready() {
                    running.push(t);
                }
                if running.is_empty() {
                    break;
                }
                let k = rng.gen_range(0..running.len());
                let t = running.swap_remove(k);
                for d in q.dependencies(t) {
                    assert!(order.contains(&d), "{t:?} ran before its dependency {d:?}");
                }
                order.push(t);
                q.complete(t).unwrap();
            }
            assert_eq!(order.len(), n);
            assert!(q.is_finished());
        }
    }
}

//! The masked mean over trial sets spread across processes (MPI ranks).
//!
//! The masked cost and its gradient are sums over trials. Each process holds
//! whole shards (stack files) and evaluates them exactly as the single-process
//! solver evaluates a set (deterministic for any thread count); each shard's
//! cost, gradient and step hint are rounded once to fixed point and summed as
//! integers ([`exact::ExactSum`]), across processes too. Integer sums do not
//! depend on order or grouping, so every process gets the same evaluation bit
//! for bit — whatever the number of processes — takes the same solver steps,
//! and the result does not depend on how the shards were spread.
//!
//! [`Collective`] is the little a run needs from the processes' world: one
//! implementation for a single process ([`Local`]) and one over MPI behind
//! the `mpi` cargo feature.

pub mod exact;
#[cfg(feature = "mpi")]
pub mod mpi_world;
pub mod sharded;

/// Element-wise reductions over all processes of a run. Every process must
/// make the same calls in the same order (the usual MPI rule).
pub trait Collective: Sync {
    /// This process's rank, from 0.
    fn rank(&self) -> usize;
    /// Number of processes.
    fn size(&self) -> usize;
    /// Replaces `v` by its element-wise sum over all processes.
    fn sum_i64(&self, v: &mut [i64]);
    /// The largest `v` over all processes.
    fn max_f64(&self, v: f64) -> f64;
    /// Every process's `message` (cut to a few kilobytes), in rank order.
    fn gather_messages(&self, message: &str) -> Vec<String>;
}

/// A run of one process.
pub struct Local;

impl Collective for Local {
    fn rank(&self) -> usize {
        0
    }
    fn size(&self) -> usize {
        1
    }
    fn sum_i64(&self, _v: &mut [i64]) {}
    fn max_f64(&self, v: f64) -> f64 {
        v
    }
    fn gather_messages(&self, message: &str) -> Vec<String> {
        vec![message.to_string()]
    }
}

/// Which rank reads shard `j` of `shards` among `ranks`: round robin.
pub fn owner(j: usize, ranks: usize) -> usize {
    j % ranks.max(1)
}

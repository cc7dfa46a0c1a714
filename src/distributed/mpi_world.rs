//! [`Collective`] over MPI (the `mpi` cargo feature, through rsmpi).

use mpi::collective::SystemOperation;
use mpi::topology::SimpleCommunicator;
use mpi::traits::*;

use super::Collective;

/// Bytes per process in [`Collective::gather_messages`].
const MESSAGE_BYTES: usize = 4096;

/// MPI_COMM_WORLD of this run; MPI is finalised when it is dropped.
pub struct MpiWorld {
    world: SimpleCommunicator,
    _universe: mpi::environment::Universe,
}

// rsmpi's communicator is not `Sync` because MPI (initialised at the
// default thread level) must not be called from several threads at once.
// lacuna makes every MPI call from the thread that runs the solver; the
// worker threads of the evaluation never see the communicator.
unsafe impl Sync for MpiWorld {}

impl MpiWorld {
    /// Initialises MPI; None when it was already initialised.
    pub fn init() -> Option<Self> {
        let universe = mpi::initialize()?;
        let world = universe.world();
        Some(MpiWorld {
            world,
            _universe: universe,
        })
    }
}

impl Collective for MpiWorld {
    fn rank(&self) -> usize {
        self.world.rank() as usize
    }
    fn size(&self) -> usize {
        self.world.size() as usize
    }
    fn sum_i64(&self, v: &mut [i64]) {
        let send = v.to_vec();
        self.world
            .all_reduce_into(&send[..], v, SystemOperation::sum());
    }
    fn max_f64(&self, v: f64) -> f64 {
        let mut out = 0.0f64;
        self.world
            .all_reduce_into(&v, &mut out, SystemOperation::max());
        out
    }
    fn gather_messages(&self, message: &str) -> Vec<String> {
        let mut buf = vec![0u8; MESSAGE_BYTES];
        let bytes = message.as_bytes();
        // Cut at a character boundary, leaving room for the terminating zero.
        let mut n = bytes.len().min(MESSAGE_BYTES - 1);
        while n > 0 && !message.is_char_boundary(n) {
            n -= 1;
        }
        buf[..n].copy_from_slice(&bytes[..n]);
        let mut all = vec![0u8; MESSAGE_BYTES * self.size()];
        self.world.all_gather_into(&buf[..], &mut all[..]);
        all.chunks(MESSAGE_BYTES)
            .map(|c| {
                let end = c.iter().position(|&b| b == 0).unwrap_or(c.len());
                String::from_utf8_lossy(&c[..end]).into_owned()
            })
            .collect()
    }
}

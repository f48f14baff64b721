"""A lab of benches: the queue of runs (:mod:`sweeprig.lab.queue`), the bench worker
(:mod:`sweeprig.lab.worker`) and the lot statistics (:mod:`sweeprig.lab.lot`), all on the
lab's PostgreSQL database (:mod:`sweeprig.store.postgres`)."""

"""Many task chains at once: many molecules times one job, or one molecule times many starts.

* :func:`run_batch` -- one TOML job definition on a list of molecules (XYZ files, folders,
  SMILES lists); one job folder per molecule, one summary (JSON, CSV, plot) for the set.
* :func:`explore_seam` -- crossing searches from many starts around one point, run in
  parallel, the converged points merged into distinct crossings.
* :class:`ClusterSettings` -- where the work runs: in this process (serial), on a local Dask
  cluster (default when Dask is installed), or on an existing Dask scheduler.

Dask (``distributed``) is optional: ``pip install 'surfcross[dask]'``. Without it everything
runs one chain after another in this process.
"""

from .chain import ChainReport, run_chain
from .inputs import Chain, JobTemplate, collect_molecules, make_chains, read_job_template
from .molecules import BatchResult, run_batch, run_chains
from .scheduler import ClusterSettings, Work, available_cores, have_dask, plan_workers, run_all
from .seam import MergeRule, SeamResult, StartPlan, explore_seam, merge_crossings
from .alignment import permuted_rmsd

__all__ = ["ChainReport", "run_chain", "Chain", "JobTemplate", "collect_molecules",
           "make_chains", "read_job_template", "BatchResult", "run_batch", "run_chains",
           "ClusterSettings", "Work", "available_cores", "have_dask", "plan_workers", "run_all",
           "MergeRule", "SeamResult", "StartPlan", "explore_seam", "merge_crossings",
           "permuted_rmsd"]

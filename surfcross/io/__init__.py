"""The run record: run directory, HDF5 checkpoint, XYZ trajectory, progress lines, report,
plots, result.json, and SMILES start geometries."""

from .checkpoint import CheckpointData, CheckpointWriter, load_checkpoint
from .progress import ProgressWriter, log_settings
from .report import render_report
from .results import RESULT_KEYS, result_dict, to_jsonable
from .run import RunDirectory
from .smiles import geometry_from_smiles
from .trajectory import TrajectoryWriter, parse_comment

__all__ = ["CheckpointData", "CheckpointWriter", "load_checkpoint", "ProgressWriter",
           "log_settings", "render_report", "RESULT_KEYS", "result_dict", "to_jsonable",
           "RunDirectory", "TrajectoryWriter", "parse_comment", "geometry_from_smiles"]

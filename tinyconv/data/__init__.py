"""Data intake: loaders, validation, preparation, normalisation, the tiles demo.

``load_data(spec)`` gives a validated :class:`Dataset` from a folder, a
``.npz``, ``builtin:tiles`` or ``builtin:digits``; ``survey(spec)`` what a
source holds with every problem that stops a search, found in one pass; ``prepare`` resizes and
converts images for an input spec; ``fit_normalisation`` / ``normalise``
standardise per channel with statistics from training images only;
``fingerprint`` identifies a data set; ``check_folds`` / ``max_folds`` say
how many stratified folds it allows.
"""

from .dataset import DataNote, DataWarning, Dataset, Intake, LeakageWarning
from .fingerprint import fingerprint
from .load import load_data, load_with_intake, survey
from .survey import Survey
from .normalise import fit_normalisation, normalise, normalise_fold
from .prepare import prepare
from .tiles import CLASSES as TILE_CLASSES, make_tiles
from .validate import check_folds, max_folds

__all__ = [
    "DataNote", "DataWarning", "Dataset", "Intake", "LeakageWarning", "Survey", "TILE_CLASSES",
    "check_folds", "fingerprint", "fit_normalisation", "load_data", "load_with_intake",
    "make_tiles", "max_folds", "normalise", "normalise_fold", "prepare", "survey",
]

# Type stubs of the compiled module (python/src/lib.rs). Use the wrappers in
# lacuna/__init__.py; they check arrays and fill in the defaults.
from typing import List, Optional, Tuple

import numpy as np
import numpy.typing as npt

__version__: str

class LacunaError(ValueError): ...

def mean(
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    weights: Optional[npt.NDArray[np.float64]],
    channels: Optional[List[str]],
    job_json: str,
) -> Tuple[npt.NDArray[np.float64], str]: ...
def schemes() -> List[Tuple[str, str]]: ...
def extract(
    job_json: str,
) -> Tuple[npt.NDArray[np.float64], npt.NDArray[np.bool_], str]: ...
def compare(
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    weights: Optional[npt.NDArray[np.float64]],
    channels: Optional[List[str]],
    labels: Optional[List[str]],
    sessions: Optional[List[str]],
    job_json: str,
) -> str: ...
def grouped_mean(
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    weights: Optional[npt.NDArray[np.float64]],
    channels: Optional[List[str]],
    labels: Optional[List[str]],
    sessions: Optional[List[str]],
    job_json: str,
    by: str,
    grand: str,
) -> Tuple[
    List[Tuple[str, npt.NDArray[np.float64]]],
    List[Tuple[str, npt.NDArray[np.float64]]],
    str,
]: ...
def recentre(
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    weights: Optional[npt.NDArray[np.float64]],
    channels: Optional[List[str]],
    sessions: Optional[List[str]],
    job_json: str,
) -> Tuple[npt.NDArray[np.float64], str]: ...
def train(
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    weights: Optional[npt.NDArray[np.float64]],
    channels: Optional[List[str]],
    labels: List[str],
    sessions: Optional[List[str]],
    job_json: str,
) -> str: ...
def classify(
    model_json: str,
    stack: npt.NDArray[np.float64],
    mask: npt.NDArray[np.bool_],
    channels: Optional[List[str]],
    sessions: Optional[List[str]],
) -> Tuple[List[str], npt.NDArray[np.float64]]: ...
def merge(
    sets: List[
        Tuple[
            str,
            npt.NDArray[np.float64],
            npt.NDArray[np.bool_],
            List[str],
            Optional[List[str]],
            Optional[List[str]],
        ]
    ],
) -> Tuple[
    npt.NDArray[np.float64],
    npt.NDArray[np.bool_],
    List[str],
    Optional[List[str]],
    List[str],
    str,
]: ...

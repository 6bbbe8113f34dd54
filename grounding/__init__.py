"""grounding: earthing-grid studies by the method of moments, with IEEE Std 80 safety checks.

Python API::

    from grounding import load_case, run_study
    case = load_case("cases/river-terrace-uniform.yaml")
    result = run_study(case)
    print(result.grid_resistance, result.ground_potential_rise, result.surface.max_touch)
"""

from .case.load import load_case, parse_case
from .cautions import CAUTIONS
from .errors import CaseError, GroundingError
from .study.pipeline import run_study
from .study.result import StudyResult
from .version import __version__

__all__ = ["CAUTIONS", "CaseError", "GroundingError", "StudyResult", "load_case", "parse_case", "run_study",
           "__version__"]

"""grounding: earthing-grid studies by the method of moments, with IEEE Std 80 safety checks.

Python API::

    from grounding import load_case, run_study
    case = load_case("cases/river-terrace-uniform.yaml")
    result = run_study(case)
    print(result.grid_resistance, result.ground_potential_rise, result.surface.max_touch)
"""

from .case_loader import load_case, parse_case
from .cautions import CAUTIONS
from .errors import CaseError, GroundingError
from .study import StudyResult, run_study

__version__ = "0.1.0"

__all__ = ["CAUTIONS", "CaseError", "GroundingError", "StudyResult", "load_case", "parse_case", "run_study",
           "__version__"]

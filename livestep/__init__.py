"""livestep: find, measure and model every setpoint step in a controller's data stream.

The numerical core needs no UI and no I/O::

    from livestep import analyze_chunks, SampleChunk
    results = list(analyze_chunks([SampleChunk(t=t, setpoint=sp, feedback=fb)]))
"""

from livestep.judge.profile import Profile, load_profile
from livestep.judge.verdict import StepVerdict, judge
from livestep.steps.analysis import AnalysisSettings, StepAnalyzer, StepResult, analyze_chunks
from livestep.steps.detect import DetectorSettings, StepDetector, StepWindow
from livestep.steps.measure import MeasureSettings, StepMetrics, measure_step
from livestep.steps.model_fit import (
    ClosedFormEstimate,
    ModelFit,
    closed_form_estimate,
    fit_second_order,
)
from livestep.steps.samples import SampleChunk

__version__ = "0.1.0"

__all__ = [
    "AnalysisSettings", "ClosedFormEstimate", "DetectorSettings", "MeasureSettings", "ModelFit",
    "Profile", "SampleChunk", "StepAnalyzer", "StepDetector", "StepMetrics", "StepResult",
    "StepVerdict", "StepWindow", "analyze_chunks", "closed_form_estimate", "fit_second_order",
    "judge", "load_profile", "measure_step",
]

"""The jobs, one function each, and the Python API: a request dataclass in, a result object
out, and ``write_*_folder(result, out)`` writing the whole output layout of that job
(outputs/README.md) from the one result.

=====================  ==========================  ===========================
job                    compute                     write
=====================  ==========================  ===========================
check an allocation    :func:`check_study`         :func:`write_check_folder`
plan an allocation     :func:`plan_study`          :func:`write_plan_folder`
frequency indication   :func:`frequency_study`     :func:`write_frequency_folder`
fleet review           :func:`review_folder`       :func:`write_review_folder`
the demo               :func:`run_demo`            :func:`write_demo_folder`
=====================  ==========================  ===========================

The command line (:mod:`allocator.cli`) parses options into these requests and prints the
results; nothing below it knows about argparse.
"""

from .check import CheckRequest, CheckResult, check_study, write_check_folder
from .demo import DemoRequest, DemoResult, run_demo, write_demo_folder
from .frequency import FrequencyRequest, FrequencyResult, frequency_study, write_frequency_folder
from .inputs import Sources, load_inputs, no_progress
from .plan import PlanOptions, PlanRequest, PlanResult, plan_study, write_plan_folder
from .review import ReviewRequest, review_folder, write_review_folder

__all__ = ["Sources", "load_inputs", "no_progress",
           "CheckRequest", "CheckResult", "check_study", "write_check_folder",
           "PlanOptions", "PlanRequest", "PlanResult", "plan_study", "write_plan_folder",
           "FrequencyRequest", "FrequencyResult", "frequency_study", "write_frequency_folder",
           "ReviewRequest", "review_folder", "write_review_folder",
           "DemoRequest", "DemoResult", "run_demo", "write_demo_folder"]

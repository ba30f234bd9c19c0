"""Many images: job files, the parallel runner with resume, and the results tables."""

from tracefit.survey import jobs, runner
from tracefit.survey.jobs import JOB_FORMAT, ImageJob, Job, key_lines, load_job, parse_job
from tracefit.survey.runner import (
    CSV_COLUMNS,
    EXIT_BAD_JOB,
    EXIT_OK,
    EXIT_SOME_FAILED,
    ImageAnalysis,
    SurveyResult,
    analyse_image,
    available_cores,
    csv_rows,
    image_fingerprint,
    process_image,
    run_survey,
    software_versions,
    write_results_csv,
)

# each module lists its public names once; the package offers them all
__all__ = list(dict.fromkeys(jobs.__all__ + runner.__all__))

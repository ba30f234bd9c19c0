"""Many images: job files, the parallel runner with resume, and the results tables.
"""


from tracefit.survey.jobs import (
    Job,
    ImageJob,
    load_job,
    parse_job,
    key_lines,
    JOB_FORMAT,
)
from tracefit.survey.runner import (
    SurveyResult,
    ImageAnalysis,
    run_survey,
    analyse_image,
    process_image,
    image_fingerprint,
    csv_rows,
    write_results_csv,
    software_versions,
    available_cores,
    CSV_COLUMNS,
    EXIT_OK,
    EXIT_SOME_FAILED,
    EXIT_BAD_JOB,
)

__all__ = [
    "Job",
    "ImageJob",
    "load_job",
    "parse_job",
    "key_lines",
    "JOB_FORMAT",
    "SurveyResult",
    "ImageAnalysis",
    "run_survey",
    "analyse_image",
    "process_image",
    "image_fingerprint",
    "csv_rows",
    "write_results_csv",
    "software_versions",
    "available_cores",
    "CSV_COLUMNS",
    "EXIT_OK",
    "EXIT_SOME_FAILED",
    "EXIT_BAD_JOB",
]

"""prep: from raw ticket exports to clean, reproducible splits for text classification.

The public API is small: load a pipeline file, run it.

    >>> from prep import load_pipeline, run_pipeline
    >>> result = run_pipeline(load_pipeline("sample_inputs/pipeline.yaml"))  # doctest: +SKIP
"""

from __future__ import annotations

import importlib
from typing import Any

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "PrepError",
    "PipelineError",
    "InputError",
    "DataError",
    "OutputError",
    "Pipeline",
    "load_pipeline",
    "RunResult",
    "run_pipeline",
]

_LAZY = {
    "PrepError": "prep.errors",
    "PipelineError": "prep.errors",
    "InputError": "prep.errors",
    "DataError": "prep.errors",
    "OutputError": "prep.errors",
    "Pipeline": "prep.pipeline",
    "load_pipeline": "prep.pipeline",
    "RunResult": "prep.run",
    "run_pipeline": "prep.run",
}


def __getattr__(name: str) -> Any:
    # Imported on first use so that `import prep.read` does not pull in the whole runner.
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'prep' has no attribute {name!r}")

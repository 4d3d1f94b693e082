"""luxsweep orchestration: study files, variants, cache, Dask execution, results, ranking."""

__version__ = "0.1.0"

__all__ = [
    "__version__",
]

"""Reports: the end-to-end demo, its pictures and its Markdown report.

    run_demo(Path("demo-out"))                      -> summary dict
    run_demo(out, seed=3, preset="open-field", iterations=4, progress=False)
"""

from .demo import RUNS, run_demo

__all__ = ["RUNS", "run_demo"]

"""Reports: the end-to-end demo, its pictures and its Markdown report.

    run_demo(Path("demo-out"))                      -> summary dict
    run_demo(out, seed=3, preset="open-field", iterations=4, progress=False)

The demo is imported on first use, so that `peerfix.report.style` or
`peerfix.report.tracks` do not pull in the whole demo.
"""

__all__ = ["RUNS", "run_demo"]


def __getattr__(name):
    if name in __all__:
        from . import demo

        return getattr(demo, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

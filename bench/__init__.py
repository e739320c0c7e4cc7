"""quadruped-bench: a scenario test bench for legged-robot controllers, backed by MuJoCo."""

__version__ = "0.1.0"

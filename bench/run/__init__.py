"""The single run path: load and check, plan, execute, sinks; and what identifies a verdict."""

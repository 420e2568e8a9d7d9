"""Sub-command modules: each has configure(parser) and run(args) -> int."""

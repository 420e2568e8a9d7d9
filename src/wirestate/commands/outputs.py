"""Checks of the output files a command names, made before any work starts.

A long run (a tuning, a yield on thousands of samples) that fails only at the end because
``--json`` names a missing folder wastes the user's time; every command checks its output
paths first.
"""

from __future__ import annotations


def check_outputs(
    *, figures: tuple[str, ...] = (), inputs: tuple[str, ...] = (), **files: str | None
) -> None:
    """Refuse, before any work, an output path whose folder is missing or not writable,
    that names a folder or one of the run's input files or an existing model file, or (for
    the options named in ``figures``) whose suffix is not a figure format.

    Parameters
    ----------
    figures
        The options (keys of ``files``) that name figures.
    inputs
        The files the run reads (never replaced by an output).
    files
        Option name (``json``, ``csv``, ``plot``...) -> the path given, or ``None``.
    """
    from wirestate.simulate.guards import check_output_path

    for option, path in files.items():
        if path is None:
            continue
        check_output_path(path, f"--{option}", inputs=inputs)
        if option in figures:
            from wirestate.report.figure import figure_format

            figure_format(path)

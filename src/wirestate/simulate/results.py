"""Simulation results with signal names and units; CSV output and python-control form."""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import control
import numpy as np

from wirestate.atomic import open_atomic
from wirestate.errors import SimulationError

SHIFTED_SUFFIX = "_shifted"


@dataclass
class SimulationResult:
    """Time series of one run, every value in SI base units.

    Attributes
    ----------
    name
        System or block name.
    time
        ``(N,)`` sample times in s, starting at ``t = 0``.
    output_names, outputs
        Output names and the ``(n_outputs, N)`` array of their values.
    state_names, states
        State names and the ``(n_states, N)`` array.
    input_names, inputs
        Input names and the ``(n_inputs, N)`` array of the input samples used.
    units
        Unit of every output, state and input name (``""`` when unknown).
    method
        One line naming how the run was computed (hold, integrator, tolerances).
    state_offset
        ``(n_states, n_inputs)`` or None; a circuit's ``<name>_shifted`` state plus
        ``state_offset @ u`` is the physical quantity (see :meth:`physical_states`).
    events
        Switching events of a switched circuit, ``(time, part, "off -> on")`` in time
        order (empty otherwise).
    modes
        For a switched circuit, the mode between events: ``(start, end, on)`` intervals
        covering the run, ``on`` the conduction of every switch and diode (empty otherwise).
    """

    name: str
    time: np.ndarray
    output_names: list[str]
    outputs: np.ndarray
    state_names: list[str]
    states: np.ndarray
    input_names: list[str] = field(default_factory=list)
    inputs: np.ndarray | None = None
    units: dict[str, str] = field(default_factory=dict)
    method: str = ""
    state_offset: np.ndarray | None = None
    events: list = field(default_factory=list)
    modes: list = field(default_factory=list)

    def physical_states(self) -> tuple[list[str], np.ndarray]:
        """Capacitor voltages and inductor currents: every state plus ``state_offset @ u``,
        named without the ``_shifted`` suffix (the states themselves where no offset)."""
        names = [n.removesuffix(SHIFTED_SUFFIX) for n in self.state_names]
        if self.state_offset is None or self.inputs is None or not np.any(self.state_offset):
            return names, self.states.copy()
        return names, self.states + self.state_offset @ self.inputs

    def physical_state(self, name: str) -> np.ndarray:
        """The samples of one capacitor voltage or inductor current, by its physical name
        (``v_C1`` for a state ``v_C1_shifted``) or by the state's own name."""
        names, values = self.physical_states()
        return self._row(name.removesuffix(SHIFTED_SUFFIX), names, values, "state")

    def output(self, name: str) -> np.ndarray:
        """The samples of one output, by name."""
        return self._row(name, self.output_names, self.outputs, "output")

    def state(self, name: str) -> np.ndarray:
        """The samples of one state, by name."""
        return self._row(name, self.state_names, self.states, "state")

    def _row(self, name: str, names: list[str], data: np.ndarray, what: str) -> np.ndarray:
        if name not in names:
            raise SimulationError(
                "unknown_signal",
                f"no {what} named {name!r} ({what}s: {', '.join(names) or 'none'})",
                location=(what + "s", name),
            )
        return data[names.index(name)]

    def to_response_data(self) -> control.TimeResponseData:
        """The run as python-control's ``TimeResponseData`` (labels kept)."""
        inputs = self.inputs if self.inputs is not None and len(self.input_names) else None
        return control.TimeResponseData(
            self.time,
            self.outputs,
            states=self.states if len(self.state_names) else None,
            inputs=inputs,
            output_labels=list(self.output_names),
            state_labels=list(self.state_names) or None,
            input_labels=list(self.input_names) if inputs is not None else None,
            sysname=self.name,
            issiso=False,
        )

    def write_csv(self, path: str | Path) -> Path:
        """Write columns ``time`` then every output (SI units), one row per sample.

        The file is written to a temporary file in the same directory and moved into place
        (``os.replace``), so a reader never sees half a file.
        """
        path = Path(path)
        try:
            with open_atomic(path) as handle:
                write_csv_header(handle, self.output_names)
                write_csv_rows(handle, self.time, self.outputs)
        except OSError as exc:
            raise SimulationError(
                "file_not_found",
                f"cannot write the CSV file: {exc.strerror or exc}",
                file=str(path),
            ) from None
        return path


#: rows formatted per piece when writing a CSV, so the text never holds the whole run
_CSV_ROWS = 20_000


def write_csv_header(handle: Any, output_names: list[str]) -> None:
    """The CSV header ``time,<outputs>``."""
    csv.writer(handle, lineterminator="\n").writerow(["time", *output_names])


def write_csv_rows(handle: Any, time: np.ndarray, outputs: np.ndarray) -> None:
    """Rows ``time, outputs...`` (``repr`` of each float, so values read back exactly)."""
    writer = csv.writer(handle, lineterminator="\n")
    for start in range(0, len(time), _CSV_ROWS):
        data = np.vstack([time[np.newaxis, start : start + _CSV_ROWS],
                          outputs[:, start : start + _CSV_ROWS]]).T  # fmt: skip
        writer.writerows([repr(float(v)) for v in row] for row in data)

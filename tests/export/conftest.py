"""Shared set-up of the FMU export tests: the compiler check and exported FMUs."""

from __future__ import annotations

from pathlib import Path

import pytest

from wirestate.errors import WirestateError
from wirestate.export.build import find_compiler

ROOT = Path(__file__).resolve().parents[2]
MODELS = ROOT / "models"
CIRCUITS = [
    "drive_bus_filter.toml",
    "feeder_cable.toml",
    "lcl_grid_filter.toml",
    "servo_armature.toml",
    "systems/voice_coil.toml",
]
SYSTEM = "systems/battery_drive.toml"


def _compiler_reason() -> str | None:
    try:
        find_compiler()
    except WirestateError as exc:
        return f"no C compiler to build FMU binaries: {exc.message}"
    return None


NO_COMPILER = _compiler_reason()
needs_compiler = pytest.mark.skipif(NO_COMPILER is not None, reason=NO_COMPILER or "")


@pytest.fixture(scope="session")
def exported(tmp_path_factory):
    """``exported(model, step)`` -> path of the FMU, built once per session."""
    from wirestate.export import export_fmu

    folder = tmp_path_factory.mktemp("fmus")
    made: dict[tuple[str, float], Path] = {}

    def build(model: str | Path, step: float = 1e-6) -> Path:
        key = (str(model), step)
        if key not in made:
            source = Path(model) if Path(model).is_absolute() else MODELS / model
            target = folder / f"{source.stem}_{len(made)}.fmu"
            export_fmu(source, target, step=step)
            made[key] = target
        return made[key]

    return build


class Slave:
    """A thin helper around fmpy's low-level FMU2Slave: set/get by variable name."""

    def __init__(self, fmu: Path, name: str = "instance") -> None:
        from fmpy import extract, read_model_description
        from fmpy.fmi2 import FMU2Slave

        self.md = read_model_description(str(fmu))
        self.refs = {v.name: v.valueReference for v in self.md.modelVariables}
        self.fmu = FMU2Slave(
            guid=self.md.guid,
            unzipDirectory=extract(str(fmu)),
            modelIdentifier=self.md.coSimulation.modelIdentifier,
            instanceName=name,
        )
        self.fmu.instantiate()
        self.fmu.setupExperiment(startTime=0.0)
        self.fmu.enterInitializationMode()
        self.fmu.exitInitializationMode()

    def set(self, **values: float) -> None:
        self.fmu.setReal([self.refs[k] for k in values], [float(v) for v in values.values()])

    def get(self, names) -> list[float]:
        return self.fmu.getReal([self.refs[n] for n in names])

    def close(self) -> None:
        self.fmu.terminate()
        self.fmu.freeInstance()

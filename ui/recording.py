"""Start and close a recorded run: folder, description, estimates stream, catalogue entry."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from collections.abc import Mapping, Sequence

    from daq.runs import RunWriter
    from estimator.profile import CellProfile

__all__ = ["CATALOGUE_NAME", "Recording", "catalogue_for", "open_recording"]

#: File name of the run catalogue kept in the root folder of the runs.
CATALOGUE_NAME = "catalogue.sqlite"


@dataclass
class Recording:
    """A run being written; `close` seals it and updates the catalogue."""

    writer: RunWriter
    folder: Path
    run_id: str
    root: Path

    def close(self, status: str, summary: Mapping[str, Any]) -> None:
        """Seal the run with `status` and `summary`, then index it (idempotent)."""
        self.writer.close(status, dict(summary))
        catalogue_for(self.root).upsert(self.folder)


def catalogue_for(root: Path) -> Any:
    """The catalogue of the runs under `root` (created on first use)."""
    from daq.catalogue import Catalogue

    return Catalogue(Path(root) / CATALOGUE_NAME)


def open_recording(
    root: Path,
    profile: CellProfile,
    *,
    note: str = "",
    tags: Sequence[str] = (),
    acquisition: Mapping[str, Any] | None = None,
) -> Recording:
    """Create a new run folder under `root` recording samples and live estimates."""
    from daq.runs import RunWriter
    from estimator.observer import ESTIMATE_DTYPE
    from estimator.profile import profile_to_toml
    from ui.pipeline import ESTIMATE_STREAM, ESTIMATE_UNITS
    from ui.version import software_version

    root = Path(root)
    root.mkdir(parents=True, exist_ok=True)
    acq = profile.acquisition
    writer = RunWriter.new(
        root,
        operator_note=note,
        tags=list(tags),
        cell_name=profile.cell.name,
        profile_toml=profile_to_toml(profile),
        software_version=software_version(),
        acquisition={
            "framing": acq.framing,
            "sample_rate_hz": acq.sample_rate_hz,
            "baudrate": acq.baudrate,
            **dict(acquisition or {}),
        },
        extra_streams={ESTIMATE_STREAM: (ESTIMATE_DTYPE, ESTIMATE_UNITS)},
    )
    catalogue_for(root).upsert(writer.folder)
    return Recording(writer, writer.folder, writer.run_id, root)

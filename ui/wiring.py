"""Build the `daq` objects a cell profile describes (scaling, decoder, port, simulated cell).

`daq` and `estimator` never import each other; this module is where a profile's numbers
become acquisition objects.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from daq.decoding import Decoder
    from daq.scaling import Scaling
    from daq.serial_source import PortSettings
    from daq.simulator import SimulatedCell
    from estimator.profile import CellProfile

__all__ = [
    "decoder_for",
    "parse_faults",
    "port_settings_for",
    "profile_from_text",
    "scaling_for",
    "simulated_cell_for",
]


def scaling_for(profile: CellProfile) -> Scaling:
    """Counts → metres as the profile's ``[transducer]`` table says."""
    from daq.scaling import Scaling

    tr = profile.transducer
    return Scaling(tr.volts_per_count, tr.metres_per_volt, tr.zero_volts)


def decoder_for(profile: CellProfile) -> Decoder:
    """The frame decoder of the profile's ``[acquisition]`` framing."""
    from daq.decoding import make_decoder

    acq = profile.acquisition
    return make_decoder(
        acq.framing,
        scaling_for(profile),
        acq.sample_rate_hz,
        delimiter=acq.line_delimiter.encode("ascii"),
        columns=acq.columns,
    )


def port_settings_for(profile: CellProfile, port: str | None = None) -> PortSettings:
    """Serial settings of the profile; `port` overrides ``[acquisition] port``."""
    from daq.serial_source import PortSettings

    acq = profile.acquisition
    return PortSettings(
        port=port if port is not None else acq.port,
        baudrate=acq.baudrate,
        parity=acq.parity,
        stop_bits=acq.stop_bits,
        data_bits=acq.data_bits,
    )


def simulated_cell_for(
    profile: CellProfile, *, seed: int = 0, sample_rate_hz: float | None = None
) -> SimulatedCell:
    """A simulated cell with the profile's mechanics, noise and scaling (invented data)."""
    from daq.simulator import SimulatedCell

    pl, tr = profile.plant, profile.transducer
    return SimulatedCell(
        mass_kg=pl.mass_kg,
        stiffness_n_per_m=pl.stiffness_n_per_m,
        damping_ratio=pl.damping_ratio,
        noise_m=tr.noise_m,
        scaling=scaling_for(profile),
        sample_rate_hz=sample_rate_hz or profile.acquisition.sample_rate_hz,
        seed=seed,
    )


def profile_from_text(text: str, origin: str) -> CellProfile:
    """Parse a profile stored as TOML text (as a run keeps it); errors name `origin`."""
    import tomllib

    from estimator.profile import ProfileError, profile_from_mapping

    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"{origin}: not valid TOML: {exc}") from exc
    return profile_from_mapping(data, origin=origin)


def parse_faults(spec: str, *, option: str = "faults") -> list[Any]:
    """Parse ``KIND@T[:DURATION][*COUNT],...`` into `daq.simulator.Fault` values."""
    from daq.simulator import Fault

    faults = []
    for item in filter(None, (s.strip() for s in spec.split(","))):
        kind, at, rest = item.partition("@")
        if not at:
            raise ValueError(f"{option}: {item!r} lacks '@T' (e.g. drop@1.5*20)")
        count = 1
        if "*" in rest:
            rest, _, count_text = rest.partition("*")
            try:
                count = int(count_text)
            except ValueError:
                raise ValueError(
                    f"{option}: {item!r}: count {count_text!r} is not whole"
                ) from None
        time_text, _, duration_text = rest.partition(":")
        try:
            at_s = float(time_text)
            duration_s = float(duration_text) if duration_text else 0.0
        except ValueError:
            raise ValueError(f"{option}: {item!r}: time or duration is not a number") from None
        faults.append(Fault(kind.strip(), at_s, duration_s=duration_s, count=count))
    return faults


def refuse_demo_model_on_a_real_port(port: str | None, profile_path: str | None) -> None:
    """A real port needs the profile of the cell on it: the built-in demo cell's model
    (an invented cell) would turn its displacement into wrong forces, and a recorded run
    would carry them. Raises ValueError naming the way to make a profile."""
    if port and not profile_path:
        raise ValueError(
            f"--port {port}: give the profile of the cell on that port (--profile FILE); "
            "the built-in demo cell's model is for the simulated cell only. Make one with "
            "`forcelens profile new CELL.toml ...` from the cell's known stiffness and mass, "
            "then refine it with `forcelens identify` and `forcelens calibrate`"
        )

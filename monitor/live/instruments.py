"""Opening the bench's instruments: resource -> SCPI link -> profile-driven driver.

Each opener is a function of no arguments, so the acquisition thread can call it
again to reconnect after a lost instrument. The profile is loaded once, up front,
so that a bad profile is reported before anything is opened.
"""

from __future__ import annotations

from ...drivers.digitiser import Digitiser, unapplied_settings
from ...drivers.errors import InstrumentError
from ...drivers.generator import Generator
from ...drivers.profile import load_profile
from ...drivers.scpi import ScpiLink
from ...drivers.stage import Stage, load_stage_profile, open_stage
from ...drivers.thermometer import Thermometer, load_thermometer_profile, open_thermometer
from .acquisition import OpenInstrument


def _open_link(config, profile, name: str) -> ScpiLink:
    # open_resource (under ScpiLink.open) already switches Nagle's algorithm off.
    timeout_s = config.timeout_s if config.timeout_s else profile.timeout_s
    return ScpiLink.open(config.resource, visa_library=config.visa_library,
                            timeout_s=timeout_s, read_termination=profile.read_termination,
                            write_termination=profile.write_termination,
                            name=f"{name} {config.resource}",
                            resync_timeout_s=timeout_s + 2.0)


def digitiser_opener(config, settings):
    """Returns ``open() -> OpenInstrument``: connect, identify, send the profile's setup
    lines and configure the digitiser.

    Parameters
    ----------
    config : tankside.monitor.live.benchfile.InstrumentConfig
    settings : tankside.drivers.digitiser.DigitiserSettings
    """
    profile = load_profile(config.profile)

    def open_digitiser() -> OpenInstrument:
        link = _open_link(config, profile, "digitiser")
        try:
            device = Digitiser(link, profile)
            identity = device.identity
            device.send_setup()
            device.configure(settings)
        except InstrumentError:
            link.close(quiet=True)   # the error that made us give up is raised
            raise
        return OpenInstrument(device=device, link=link, identity=identity)

    return open_digitiser


def unapplied_note(bench) -> str | None:
    """What to tell the operator once at start about the bench's ``[digitiser]``
    settings its profile has no command for, or None when every one is applied.

    Such a setting is never sent and each trace records it as not set (null).
    """
    profile = load_profile(bench.digitiser.profile)
    names = unapplied_settings(profile, bench.digitiser_table)
    if not names:
        return None
    parts = []
    plain = [n for n in names if n != "sample_rate_hz"]
    if plain:
        parts.append(f"{', '.join(plain)}: the profile has no command to set "
                     f"{'it' if len(plain) == 1 else 'them'}; not applied, recorded as not set")
    if "sample_rate_hz" in names:
        parts.append("sample_rate_hz: the profile cannot set the rate; it is checked against "
                     "the digitiser's own time step at start")
    return f"digitiser {profile.source}: " + "; ".join(parts)


def generator_opener(config):
    """Returns ``open() -> OpenInstrument``: connect, identify the generator and send its
    profile's setup lines.

    Nothing is set and the output is not touched: settings are applied once, by
    :func:`apply_generator_settings`, after the session file exists.
    """
    profile = load_profile(config.profile)

    def open_generator() -> OpenInstrument:
        link = _open_link(config, profile, "generator")
        try:
            device = Generator(link, profile)
            identity = device.identity
            device.send_setup()
        except InstrumentError:
            link.close(quiet=True)   # the error that made us give up is raised
            raise
        return OpenInstrument(device=device, link=link, identity=identity)

    return open_generator


def apply_generator_settings(device, config) -> None:
    """Apply the bench's generator settings with the output off.

    The drive is the operator's: the output is switched off first when it is on (a
    new amplitude or burst never reaches the transducer unannounced) and is never
    switched on here.
    """
    settings = (config.frequency_hz, config.amplitude_vpp, config.burst_cycles,
                config.burst_period_s)
    changes = any(value is not None for value in settings)
    if config.output is False or (changes and device.output_is_on()):
        device.set_output(False)
    if config.frequency_hz is not None:
        device.set_frequency(config.frequency_hz)
    if config.amplitude_vpp is not None:
        device.set_amplitude(config.amplitude_vpp)
    if config.burst_cycles is not None or config.burst_period_s is not None:
        device.set_burst(config.burst_cycles, config.burst_period_s)


def stage_opener(config):
    """Returns ``open() -> Stage`` for a bench's ``[stage]`` (a
    :class:`~tankside.monitor.live.benchfile.StageConfig`): the profile is loaded now, so
    a bad one is reported before anything is opened; the soft limits go to the driver
    too, which refuses a target outside them before sending."""
    profile = load_stage_profile(config.profile)

    def open_() -> Stage:
        return open_stage(profile, port=config.port, address=config.address,
                          baud_rate=config.baud_rate, timeout_s=config.timeout_s,
                          limits=dict(config.limits))

    return open_


def thermometer_opener(config):
    """Returns ``open() -> Thermometer`` for a bench's ``[thermometer]``."""
    profile = load_thermometer_profile(config.profile)

    def open_() -> Thermometer:
        return open_thermometer(profile, port=config.port, address=config.address,
                                baud_rate=config.baud_rate, timeout_s=config.timeout_s)

    return open_

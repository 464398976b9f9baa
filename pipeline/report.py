"""Plain-text reports for the command line: the plan before a run, the summary after."""

import math

import astropy.units as u

from pipeline.instrument import jy_per_beam_to_kelvin
from pipeline.units import HI_REST_FREQUENCY, format_memory

__all__ = ["format_plan", "format_summary"]


def _line(label, text):
    return f"  {label:<20s}{text}"


def format_plan(plan) -> str:
    """Return the derived numbers a user checks before spending CPU.

    Parameters
    ----------
    plan : `~pipeline.chain.RunPlan`

    Returns
    -------
    str
        Pixel size (arcsec, kpc), beam FWHM in pixels, channel width (km/s, kHz),
        band, noise per channel (Jy/beam and K), snapshot chunking, where the cube
        is held (RAM or memory-mapped), peak memory.
    """
    grid, beam, distances = plan.grid, plan.beam, plan.distances
    major_pix, minor_pix = plan.beam_fwhm_pixels
    frequencies = grid.channel_frequencies.to(u.MHz)
    lines = ["[derived]"]
    lines.append(_line("distance", f"D_L = {distances.luminosity_distance.to(u.Mpc):.4g}, "
                                   f"D_A = {distances.angular_diameter_distance.to(u.Mpc):.4g}, "
                                   f"z = {distances.systemic_redshift:.6f}"))
    lines.append(_line("pixel size", f"{grid.pixel_scale.to(u.arcsec):.3f} = {plan.pixel_size_kpc:.4f}"))
    field = (grid.n_x * plan.pixel_size_kpc, grid.n_y * plan.pixel_size_kpc)
    lines.append(_line("field of view", f"{grid.n_x} x {grid.n_y} pixels = {field[0].value:.1f} x {field[1]:.1f}"))
    lines.append(_line("beam FWHM", f"{beam.major.to(u.arcsec):.2f} x {beam.minor.to(u.arcsec):.2f}, "
                                    f"PA {beam.position_angle.to(u.deg):.1f} = {major_pix:.2f} x {minor_pix:.2f} pixels"))
    lines.append(_line("channel width", f"{grid.velocity_channel_width.to(u.km / u.s):.4f} (radio) = "
                                        f"{grid.channel_width.to(u.kHz):.4f}"))
    lines.append(_line("band", f"{frequencies.min():.6f} to {frequencies.max():.6f} in {grid.n_chan} channels "
                               f"(HI rest frequency {HI_REST_FREQUENCY.to(u.MHz):.6f})"))
    if plan.noise_rms is None:
        lines.append(_line("noise per channel", "none (noise.mode = 'none')"))
    else:
        kelvin = plan.noise_rms * jy_per_beam_to_kelvin(grid.centre_frequency, beam)
        lines.append(_line("noise per channel", f"{plan.noise_rms.to(u.mJy / u.beam):.4g} = {kelvin.to(u.mK):.4g} "
                                                f"({plan.config['noise.mode']})"))
    snapshot, memory = plan.snapshot, plan.memory
    chunk = plan.config["snapshot.chunk_particles"]
    lines.append(_line("snapshot", f"{snapshot.n_particles} particles in {math.ceil(snapshot.n_particles / chunk)} "
                                   f"chunk(s) of up to {chunk}, about {format_memory(memory.chunk_memory)} each"))
    if memory.memory_mapped:
        lines.append(_line("cube memory", f"memory-mapped in {memory.scratch_directory} "
                                          f"({format_memory(memory.scratch)} of scratch disk during the run)"))
    else:
        lines.append(_line("cube memory", "in RAM"))
    budget = plan.config["run.memory_budget"]
    lines.append(_line("peak memory", f"about {format_memory(plan.peak_memory)} (budget {format_memory(budget)})"))
    return "\n".join(lines)


def format_summary(result) -> str:
    """Return where the outputs are and the first numbers to look at after a run."""
    summary = result.summary
    lines = []
    if result.paths:
        lines.append("wrote")
        lines.extend(_line(kind, str(path)) for kind, path in result.paths.items())
    selected = summary["hi_mass_selected"].to(u.Msun)
    recovered = summary["hi_mass_recovered"].to(u.Msun)
    lines.append("summary")
    lines.append(_line("particles selected", f"{summary['n_particles_selected']}"))
    lines.append(_line("HI mass, snapshot", f"{selected.value:.4e} Msun"))
    noise = summary.get("hi_mass_noise")
    spread = "" if noise is None else f" ± {noise.to_value(u.Msun):.2e} (noise, 1 sigma)"
    lines.append(_line("HI mass, from cube", f"{recovered.value:.4e}{spread} Msun "
                                             f"({100 * (recovered / selected - 1).value:+.2f}%)"))
    lines.append(_line("outside the cube", f"{100 * summary['outside_fraction']:.3f}% of the HI"))
    lines.append(_line("W50", f"{summary['w50'].to(u.km / u.s):.1f} (observed radio velocity), "
                              f"{summary['w50_rest'].to(u.km / u.s):.1f} rest frame"))
    if summary["noise_rms"] is None:
        lines.append(_line("noise", "none"))
    else:
        lines.append(_line("noise rms", f"{summary['noise_rms'].to(u.mJy / u.beam):.4g} per channel"))
        lines.append(_line("peak S/N", f"{summary['peak_snr']:.1f}"))
    return "\n".join(lines)

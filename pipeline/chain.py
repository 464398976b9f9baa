"""The one run path: config → plan → particles → cube → files.

:func:`plan_run` turns a validated config into specs and checks feasibility
(memory, sampling, field of view) before any heavy work; :func:`run` executes the
plan.  The command line and the Python API both call these two functions.
"""

import dataclasses
import math
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np

from pipeline import __version__
from pipeline.analysis import global_profile, integrated_flux, line_width_w50, moment0, plot_preview
from pipeline.config import PARAMS_BY_KEY, SNAPSHOT_FIELDS
from pipeline.cube import Cube
from pipeline.emission import (column_density_from_flux,
                               hi_mass_from_flux, hi_weights_jy_hz, thermal_dispersion)
from pipeline.errors import (ChannelTooWideWarning, EmptyFieldError, FieldTooSmallWarning,
                             OutputError, OversizedParticleWarning,
                             ParticlesOutsideFieldWarning, UndersampledBeamWarning)
from pipeline.geometry import (GridSpec, ViewSpec, angular_momentum_axis, find_centre,
                               find_frame_velocity, make_cube_wcs, make_image_wcs, orient_chunk,
                               project_to_grid, resolve_distances, rotation_for_view,
                               velocity_dispersion_to_channels)
from pipeline.grid import accumulator, allocate_accumulator, deposit_particles
from pipeline.instrument import (JY_PER_PIXEL, BeamSpec, add_thermal_noise, convolve_with_beam,
                                 cube_to_kelvin, interferometer_rms, single_dish_rms)
from pipeline.io import atomic_output, check_free_space, check_writable, write_cube, write_image
from pipeline.memory_plan import MemoryPlan, plan_memory
from pipeline.particles import FieldSource, iter_positions, open_snapshot, select_sphere
from pipeline.units import HI_REST_FREQUENCY

__all__ = ["RunPlan", "RunResult", "Orientation", "RenderedChannels", "open_configured_snapshot", "plan_run",
           "orient_galaxy",
           "render_channels", "summarise", "run", "output_paths", "write_maps"]

@dataclasses.dataclass(frozen=True)
class RunPlan:
    """Everything a run needs, resolved and checked before heavy work.

    Attributes
    ----------
    config : `~pipeline.config.RunConfig`
    snapshot : `~pipeline.particles.Snapshot`
    grid : `~pipeline.geometry.GridSpec`
    beam : `~pipeline.instrument.BeamSpec`
    distances : `~pipeline.geometry.DistanceSpec`
    view : `~pipeline.geometry.ViewSpec`
    noise_rms : `~astropy.units.Quantity` ['spectral flux density'] or None
        Per-channel rms in Jy/beam, None when noise is off.
    memory : `~pipeline.memory_plan.MemoryPlan`
        Whether the cube stays in RAM or is memory-mapped, and the estimated
        peak memory and scratch disk.
    """

    config: object
    snapshot: object
    grid: GridSpec
    beam: BeamSpec
    distances: object
    view: ViewSpec
    noise_rms: u.Quantity | None
    memory: MemoryPlan

    @property
    def peak_memory(self) -> u.Quantity:
        """Estimated peak resident memory of the run (see `memory`)."""
        return self.memory.peak_memory

    @property
    def pixel_size_kpc(self) -> u.Quantity:
        """Physical size of one pixel at the angular-diameter distance."""
        return (self.grid.pixel_scale.to_value(u.rad) * self.distances.angular_diameter_distance).to(u.kpc)

    @property
    def beam_fwhm_pixels(self) -> tuple[float, float]:
        """Beam major and minor FWHM in pixels."""
        return (float(self.beam.major / self.grid.pixel_scale), float(self.beam.minor / self.grid.pixel_scale))


@dataclasses.dataclass(frozen=True)
class RunResult:
    """What :func:`run` returns.

    Attributes
    ----------
    cube : `~pipeline.cube.Cube`
        The observed cube (beam, noise, output unit).
    moment0 : `~astropy.units.Quantity`, shape (n_y, n_x)
        Velocity-integrated map of ``cube`` (Jy/beam km/s or K km/s).
    column_density : `~astropy.units.Quantity` ['column density'], shape (n_y, n_x)
        HI column density from ``moment0``.
    paths : dict of str to Path
        Files written (empty when ``write=False``).
    summary : dict
        Numbers a user checks first: HI mass selected and recovered, noise rms,
        peak signal-to-noise, W50, fraction of the gas outside the field.
    model : `~pipeline.cube.Cube` or None
        The noise-free cube in Jy/beam, when ``run(..., keep_model=True)``.
    """

    cube: Cube
    moment0: u.Quantity
    column_density: u.Quantity
    paths: dict
    summary: dict
    model: Cube | None = None


def _field_sources(config):
    """Map each configured snapshot quantity to its dataset or to its constant value."""
    sources = {}
    for name in SNAPSHOT_FIELDS:
        base = f"snapshot.fields.{name}"
        dataset = config[f"{base}.dataset"]
        value = config[f"{base}.value"] if f"{base}.value" in PARAMS_BY_KEY else None
        if dataset is None and value is None:
            continue
        sources[name] = FieldSource(dataset=dataset, value=None if dataset is not None else value,
                                    unit=config[f"{base}.unit"], h_power=config[f"{base}.h_power"],
                                    a_power=config[f"{base}.a_power"])
    return sources


def open_configured_snapshot(config):
    """Open the snapshot a config names, with its field map and cosmology factors.

    Returns
    -------
    `~pipeline.particles.Snapshot`
    """
    return open_snapshot(config["snapshot.path"], fields=_field_sources(config),
                         little_h=config["snapshot.little_h"],
                         little_h_attribute=config["snapshot.little_h_attribute"],
                         scale_factor=config["snapshot.scale_factor"],
                         scale_factor_attribute=config["snapshot.scale_factor_attribute"],
                         chunk_particles=config["snapshot.chunk_particles"])


def _noise_rms(config, grid):
    mode = config["noise.mode"]
    if mode == "none":
        return None
    if mode == "rms":
        return config["noise.rms"].to(u.Jy / u.beam)
    common = dict(system_temperature=config["noise.system_temperature"],
                  dish_diameter=config["noise.dish_diameter"],
                  aperture_efficiency=config["noise.aperture_efficiency"],
                  n_polarisations=config["noise.n_polarisations"],
                  channel_width=grid.channel_width,
                  integration_time=config["noise.integration_time"])
    if mode == "single_dish":
        return single_dish_rms(**common)
    return interferometer_rms(n_antennas=config["noise.n_antennas"],
                              correlator_efficiency=config["noise.correlator_efficiency"], **common)


def _systemic_velocity(config):
    """The configured cz, or 0 km/s in redshift mode (the redshift is then the systemic one)."""
    velocity = config["observer.systemic_velocity"]
    return 0 * u.km / u.s if velocity is None else velocity


def _typical_temperature(snapshot):
    """Mass-weighted median temperature of the first chunk (cheap; for the channel check)."""
    chunk = next(iter(snapshot.iter_chunks()), None)
    if chunk is None or chunk.n_particles == 0:
        raise EmptyFieldError(f"{snapshot.path}: the snapshot holds no gas particles")
    order = np.argsort(chunk.temperature_k)
    cumulative = np.cumsum(chunk.mass_msun[order])
    return chunk.temperature_k[order][np.searchsorted(cumulative, 0.5 * cumulative[-1])] * u.K


def plan_run(config, *, snapshot=None, allow_memory_map=True) -> RunPlan:
    """Resolve a validated config into specs and check the run is feasible.

    Parameters
    ----------
    config : `~pipeline.config.RunConfig`
    snapshot : `~pipeline.particles.Snapshot`, optional
        An already opened snapshot (or an in-memory one with the same
        interface) to use instead of opening ``snapshot.path``; batch runs pass
        one so that several views share one read.
    allow_memory_map : bool
        Memory-map the cube when it does not fit ``run.memory_budget`` in RAM;
        with False that is an error (batch runs cut such cubes into slabs).

    Returns
    -------
    RunPlan

    Raises
    ------
    pipeline.errors.SnapshotError
        The snapshot is missing or malformed.
    pipeline.errors.MemoryBudgetError
        The run does not fit ``run.memory_budget`` (see
        `~pipeline.memory_plan.plan_memory`).

    Warns
    -----
    UndersampledBeamWarning, FieldTooSmallWarning, ChannelTooWideWarning
    """
    if snapshot is None:
        snapshot = open_configured_snapshot(config)
    distances = resolve_distances(distance=config["observer.distance"],
                                  redshift=config["observer.redshift"],
                                  cosmology=config["observer.cosmology"],
                                  systemic_velocity=_systemic_velocity(config))
    grid = GridSpec.from_channel_width(
        n_x=config["grid.n_x"], n_y=config["grid.n_y"], n_chan=config["grid.n_chan"],
        pixel_scale=config["grid.pixel_scale"], ra=config["observer.ra"], dec=config["observer.dec"],
        projection=config["grid.projection"], spectral_axis=config["grid.spectral_axis"],
        centre_frequency=HI_REST_FREQUENCY / (1 + distances.systemic_redshift), channel_width=config["grid.channel_width"])
    beam = BeamSpec(major=config["beam.major"], minor=config["beam.minor"],
                    position_angle=config["beam.position_angle"])
    view = ViewSpec(inclination=config["geometry.inclination"],
                    position_angle=config["geometry.position_angle"],
                    orientation=config["geometry.orientation"],
                    rotation_matrix=config["geometry.rotation_matrix"])
    memory = plan_memory(grid.array_shape, beam_major_pixels=float(beam.major / grid.pixel_scale),
                         chunk_particles=min(config["snapshot.chunk_particles"], snapshot.n_particles),
                         threads=config["run.threads"] or None, budget=config["run.memory_budget"],
                         scratch_directory=config["run.scratch_directory"] or config["output.directory"],
                         allow_memory_map=allow_memory_map,
                         budget_place=config.where("run.memory_budget"))
    plan = RunPlan(config=config, snapshot=snapshot, grid=grid, beam=beam, distances=distances,
                   view=view, noise_rms=_noise_rms(config, grid), memory=memory)
    _warn_about_sampling(plan)
    return plan


def _warn_about_sampling(plan):
    config, grid = plan.config, plan.grid
    minor_pixels = min(plan.beam_fwhm_pixels)
    if minor_pixels < 3:
        warnings.warn(f"{config.where('grid.pixel_scale')}: the beam FWHM spans only {minor_pixels:.2f} pixels "
                      f"(fewer than 3); use a smaller pixel_scale", UndersampledBeamWarning, stacklevel=3)
    field_kpc = min(grid.n_x, grid.n_y) * plan.pixel_size_kpc
    selected_kpc = 2 * config["geometry.selection_radius"].to(u.kpc)
    if field_kpc < selected_kpc:
        warnings.warn(f"{config.source}:grid: the field of view spans {field_kpc:.1f}, smaller than the "
                      f"selected gas ({selected_kpc:.1f} across); raise grid.n_x/grid.n_y or lower "
                      f"geometry.selection_radius", FieldTooSmallWarning, stacklevel=3)
    temperature = _typical_temperature(plan.snapshot)
    thermal_fwhm = math.sqrt(8 * math.log(2)) * thermal_dispersion(temperature)
    channel = grid.velocity_channel_width.to(u.km / u.s)
    if channel > thermal_fwhm:
        warnings.warn(f"{config.where('grid.channel_width')}: channels of {channel:.2f} are wider than the "
                      f"thermal line FWHM ({thermal_fwhm.to(u.km / u.s):.2f} at the typical {temperature:.0f})",
                      ChannelTooWideWarning, stacklevel=3)


def output_paths(config, *, output_dir=None) -> dict:
    """Return the files a run writes, keyed by kind ("cube", "moment0", "column_density", "preview")."""
    folder = Path(output_dir) if output_dir is not None else config["output.directory"]
    name = config["output.name"]
    paths = {"cube": folder / f"{name}.fits"}
    if config["output.moment0"]:
        paths["moment0"] = folder / f"{name}_mom0.fits"
        paths["column_density"] = folder / f"{name}_nhi.fits"
    if config["output.preview"]:
        paths["preview"] = folder / f"{name}_preview.png"
    return paths


def _check_outputs(paths, plan, *, overwrite):
    folder = paths["cube"].parent
    check_writable(folder)
    for path in paths.values():
        if path.exists() and not overwrite:
            raise OutputError(f"{path}: exists; pass --overwrite to replace it")
    n_voxels = int(np.prod(plan.grid.array_shape))
    check_free_space(folder, 4 * n_voxels + 16 * plan.grid.n_x * plan.grid.n_y + 2**20)


def _check_scratch(plan, paths):
    """Make sure the scratch folder takes the memory-mapped cubes (and the outputs, on the same disk)."""
    folder = plan.memory.scratch_directory
    try:
        check_writable(folder)
        needed = plan.memory.scratch.to_value(u.byte)
        if paths and paths["cube"].parent.stat().st_dev == folder.stat().st_dev:
            needed += 4 * int(np.prod(plan.grid.array_shape))
        check_free_space(folder, needed)
    except OutputError as err:
        raise OutputError(f"{plan.config.where('run.scratch_directory')}: {err} (the cube is memory-mapped there "
                          f"because it does not fit run.memory_budget)") from err


@dataclasses.dataclass(frozen=True)
class Orientation:
    """Where the galaxy is and how it is seen: the result of the geometry passes.

    Attributes
    ----------
    centre : `~astropy.units.Quantity` ['length'], shape (3,)
        Galaxy centre in simulation coordinates.
    frame_velocity : `~astropy.units.Quantity` ['speed'], shape (3,)
        Velocity of the galaxy's rest frame in simulation coordinates.
    rotation : numpy.ndarray, shape (3, 3)
        Rows are the sky east, sky north and away-from-observer axes.
    """

    centre: u.Quantity
    frame_velocity: u.Quantity
    rotation: np.ndarray


@dataclasses.dataclass(frozen=True)
class RenderedChannels:
    """The observed cube of a range of channels, and the bookkeeping of its deposit.

    Attributes
    ----------
    cube : `~pipeline.cube.Cube`
        Beam-convolved cube of those channels in Jy/beam, with noise.
    peak_model : float
        Largest noise-free value, in Jy/beam.
    hi_mass : `~astropy.units.Quantity` ['mass']
        HI mass of the selected gas (all of it, whichever channels were rendered).
    n_selected : int
        Particles within the selection radius.
    total_weight, deposited_weight : float
        ∫S dν of the selected gas and of the part that fell in these channels (Jy Hz).
    n_contributions : int
        Voxel contributions made by the deposit.
    model : `~pipeline.cube.Cube` or None
        The same channels without noise (Jy/beam), when asked for.
    """

    cube: Cube
    peak_model: float
    hi_mass: u.Quantity
    n_selected: int
    total_weight: float
    deposited_weight: float
    n_contributions: int
    model: Cube | None = None


def orient_galaxy(plan) -> Orientation:
    """Find the centre, the velocity frame and the viewing rotation (geometry passes).

    Each pass reads positions, masses and velocities chunk by chunk, so memory
    stays bounded whatever the snapshot size.
    """
    config = plan.config

    def positions():
        return iter_positions(plan.snapshot, with_velocity=True)

    centre = find_centre(positions, method=config["geometry.centre"],
                         centre_position=config["geometry.centre_position"],
                         selection_radius=config["geometry.selection_radius"])
    if config["geometry.frame"] == "explicit":
        frame = config["geometry.frame_velocity"].to(u.km / u.s)
    else:
        frame = find_frame_velocity(positions, centre, radius=config["geometry.frame_radius"])
    spin = None
    if config["geometry.orientation"] == "angular_momentum":
        spin = angular_momentum_axis(positions, centre, frame, radius=config["geometry.selection_radius"])
    return Orientation(centre=centre, frame_velocity=frame, rotation=rotation_for_view(plan.view, spin_axis=spin))


def _slab_wcs(grid, first, stop):
    wcs = make_cube_wcs(grid)
    if (first, stop) == (0, grid.n_chan):
        return wcs
    sliced = wcs.slice((slice(first, stop), slice(None), slice(None)))
    sliced.pixel_shape = (grid.n_x, grid.n_y, stop - first)
    return sliced


def render_channels(plan, orientation, *, channels=None, progress=None, keep_model=False) -> RenderedChannels:
    """Grid, convolve and add noise to the channels ``channels`` of the planned cube.

    Parameters
    ----------
    plan : RunPlan
    orientation : Orientation
        From :func:`orient_galaxy`.
    channels : tuple of int, optional
        ``(first, stop)`` channel range of the full band (default: all). Ranges
        rendered separately and stacked equal the whole cube, noise included.
    progress : callable, optional
        Called as ``progress(n_read, n_total)`` after each snapshot chunk.
    keep_model : bool
        Also return the noise-free cube (a float32 copy, made after the
        accumulator is freed, so the peak memory does not grow).

    Returns
    -------
    RenderedChannels

    Raises
    ------
    pipeline.errors.EmptyFieldError
        No gas lies within the selection radius.
    """
    config, grid = plan.config, plan.grid
    first, stop = channels if channels is not None else (0, grid.n_chan)
    if not 0 <= first < stop <= grid.n_chan:
        raise ValueError(f"'channels' must satisfy 0 <= first < stop <= {grid.n_chan}; got {channels!r}")
    progress = progress or (lambda n_read, n_total: None)
    threads = config["run.threads"] or None
    shape = (stop - first, grid.n_y, grid.n_x)
    # 0 bytes in RAM: memory-map; else a limit no cube reaches.
    in_memory_limit = 0 if plan.memory.memory_mapped else 1 << 62
    scratch = plan.memory.scratch_directory
    with accumulator(shape, in_memory_limit=in_memory_limit, directory=scratch) as out:
        totals = _deposit_chunks(plan, orientation, out, first, progress)
        out /= grid.channel_width.to_value(u.Hz)          # Jy Hz per voxel -> Jy/pixel, in place
        convolved = allocate_accumulator(shape, in_memory_limit=in_memory_limit, directory=scratch,
                                         dtype=np.float32)
        observed = convolve_with_beam(Cube(out, _slab_wcs(grid, first, stop), JY_PER_PIXEL), plan.beam,
                                      threads=threads, out=convolved)
    peak_model = float(observed.data.max())
    model = None
    if keep_model:
        model_data = observed.data
        if plan.noise_rms is not None:
            model_data = allocate_accumulator(shape, in_memory_limit=in_memory_limit, directory=scratch,
                                              dtype=np.float32)
            np.copyto(model_data, observed.data)
        model = dataclasses.replace(observed, data=model_data)
    if plan.noise_rms is not None:
        observed = add_thermal_noise(observed, rms=plan.noise_rms, seed=config["noise.seed"], first_channel=first,
                                     threads=threads, in_place=True)
    return RenderedChannels(cube=observed, peak_model=peak_model, model=model, **totals)


def _deposit_chunks(plan, orientation, out, first, progress):
    """Deposit every selected particle of the snapshot into ``out`` (Jy Hz per voxel); return the totals."""
    config, grid = plan.config, plan.grid
    centre_kpc = orientation.centre.to_value(u.kpc)
    frame_kms = orientation.frame_velocity.to_value(u.km / u.s)
    radius_kpc = config["geometry.selection_radius"].to_value(u.kpc)
    turbulent_kms = config["emission.turbulent_dispersion"].to_value(u.km / u.s)
    is_delta = config["grid.line_profile"] == "delta"
    distance_mpc = plan.distances.luminosity_distance.to_value(u.Mpc)
    threads = config["run.threads"] or None
    n_selected, total, deposited, contributions, n_oversized = 0, 0.0, 0.0, 0, 0
    for chunk in plan.snapshot.iter_chunks():
        progress(chunk.n_particles, plan.snapshot.n_particles)
        chunk = select_sphere(chunk, centre_kpc, radius_kpc)
        if chunk.n_particles == 0:
            continue
        chunk = orient_chunk(chunk, centre_kpc, frame_kms, orientation.rotation)
        x_pix, y_pix, chan, nu_hz, kpc_to_pix = project_to_grid(
            chunk.position_kpc, chunk.velocity_kms, grid=grid, distances=plan.distances)
        if is_delta:
            sigma_chan = np.zeros_like(chan)
        else:
            thermal_kms = thermal_dispersion(chunk.temperature_k * u.K).to_value(u.km / u.s)
            sigma_chan = velocity_dispersion_to_channels(np.sqrt(thermal_kms**2 + turbulent_kms**2), nu_hz,
                                                         grid=grid)
        weight = hi_weights_jy_hz(chunk.mass_msun, chunk.hydrogen_fraction, chunk.neutral_fraction,
                                  chunk.molecular_fraction, distance_mpc)
        report = deposit_particles(x_pix, y_pix, chunk.h_kpc * kpc_to_pix, chan - first, sigma_chan, weight,
                                   out=out, kernel=config["grid.kernel"],
                                   support_factor=config["grid.support_factor"], n_threads=threads)
        n_selected += chunk.n_particles
        total += report.total_weight
        deposited += report.deposited_weight
        contributions += report.n_contributions
        n_oversized += report.n_larger_than_field
    if n_selected == 0:
        raise EmptyFieldError(f"{config.where('geometry.selection_radius')}: no gas particle lies within "
                              f"{radius_kpc:g} kpc of the centre {np.round(centre_kpc, 3).tolist()} kpc")
    if n_oversized:
        warnings.warn(f"{config.source}:grid: {n_oversized} of {n_selected} selected particles have kernels "
                      f"wider than the field of view; their emission is spread thinly over the whole cube "
                      f"(check snapshot.fields.smoothing_length.unit and grid.support_factor)",
                      OversizedParticleWarning, stacklevel=2)
    hi_mass = hi_mass_from_flux(total * u.Jy * u.Hz, plan.distances.luminosity_distance).to(u.Msun)
    return dict(hi_mass=hi_mass, n_selected=n_selected, total_weight=total, deposited_weight=deposited,
                n_contributions=contributions)


def run(config, *, output_dir=None, overwrite=False, write=True, progress=None, snapshot=None,
        keep_model=False) -> RunResult:
    """Make the synthetic observation a config describes.

    Parameters
    ----------
    config : `~pipeline.config.RunConfig`
        A validated config (see `~pipeline.config.load_config`).
    output_dir : path-like, optional
        Folder for the outputs, replacing ``output.directory``.
    overwrite : bool
        Replace existing outputs; otherwise an existing output is an error,
        raised before any heavy work.
    write : bool
        Write the files; with False only the result is returned.
    progress : callable, optional
        Called as ``progress(n_read, n_total)`` after each chunk, with the
        particles in that chunk and in the whole snapshot.
    snapshot : `~pipeline.particles.Snapshot`, optional
        Passed to :func:`plan_run`.
    keep_model : bool
        Also return the noise-free cube (`RunResult.model`), e.g. to mask on it.

    Returns
    -------
    RunResult

    Examples
    --------
    >>> from pipeline.config import load_config            # doctest: +SKIP
    >>> result = run(load_config("configs/demo.toml"), write=False)  # doctest: +SKIP
    >>> result.cube.wcs, result.cube.unit                  # doctest: +SKIP
    """
    plan = plan_run(config, snapshot=snapshot)
    if plan.memory.memory_mapped and output_dir is not None and config["run.scratch_directory"] is None:
        plan = dataclasses.replace(plan, memory=dataclasses.replace(plan.memory, scratch_directory=Path(output_dir)))
    paths = output_paths(config, output_dir=output_dir) if write else {}
    if write:
        _check_outputs(paths, plan, overwrite=overwrite)
    if plan.memory.memory_mapped:
        _check_scratch(plan, paths)
    orientation = orient_galaxy(plan)
    rendered = render_channels(plan, orientation, progress=progress, keep_model=keep_model)
    if rendered.deposited_weight <= 0:
        raise EmptyFieldError(f"{config.source}:grid: no selected gas falls inside the cube's field of view "
                              f"and band; check observer.ra/dec, grid.n_chan and grid.channel_width")
    outside = 1.0 - rendered.deposited_weight / rendered.total_weight
    if outside > 1e-3:
        warnings.warn(f"{config.source}:grid: {100 * outside:.2f}% of the selected HI falls outside the "
                      f"cube (field of view or band) and is not recorded", ParticlesOutsideFieldWarning,
                      stacklevel=2)
    result = summarise(plan, orientation, rendered, paths=paths)
    if write:
        _write_outputs(result, plan, overwrite=overwrite)
    return result


def summarise(plan, orientation, rendered, *, paths=None) -> RunResult:
    """Measure a rendered full-band cube: moment maps, line profile, HI mass, S/N.

    Parameters
    ----------
    plan : RunPlan
    orientation : Orientation
    rendered : RenderedChannels
        Covering every channel of the planned cube; the result's cube is in
        the output unit (``emission.unit``).  A memory-mapped cube is turned
        into K in place, so ``rendered.cube`` then holds K too.
    paths : dict, optional
        Output files to record in the result.

    Returns
    -------
    RunResult
    """
    config, in_jy = plan.config, rendered.cube
    velocity, profile = global_profile(in_jy)
    recovered = hi_mass_from_flux(integrated_flux(in_jy), plan.distances.luminosity_distance)
    # N_HI from the Jy/beam map whatever the output unit: one map for K and Jy/beam, with the
    # cosmological dimming of check-values HI-14 (a K map converted channel by channel at the
    # observed frequency would need its own (1 + z) factors).
    column = column_density_from_flux(moment0(in_jy), plan.beam, redshift=plan.distances.redshift)
    if config["emission.unit"] == "K":
        observed = cube_to_kelvin(in_jy, in_place=plan.memory.memory_mapped)
        map0 = moment0(observed)
    else:
        observed = in_jy
        map0 = moment0(observed)
    provenance = {
        "tool": f"cubewright {__version__}",
        "config_digest": config.digest,
        "centre_kpc": orientation.centre.to_value(u.kpc).tolist(),
        "frame_velocity_kms": orientation.frame_velocity.to_value(u.km / u.s).tolist(),
    }
    observed = dataclasses.replace(observed, provenance={**observed.provenance, **provenance})
    noise = plan.noise_rms
    w50 = line_width_w50(velocity, profile)
    summary = {
        "n_particles_selected": rendered.n_selected,
        "hi_mass_selected": rendered.hi_mass,
        "hi_mass_recovered": recovered.to(u.Msun),
        "hi_mass_noise": None if noise is None else _whole_cube_mass_noise(plan),
        "outside_fraction": 1.0 - rendered.deposited_weight / rendered.total_weight,
        "noise_rms": noise,
        "peak_snr": None if noise is None else rendered.peak_model / noise.to_value(u.Jy / u.beam),
        "w50": w50,
        "w50_rest": w50 * (1 + plan.distances.systemic_redshift),
        "voxel_contributions": rendered.n_contributions,
        "velocity": velocity,
        "profile": profile,
    }
    return RunResult(cube=observed, moment0=map0, column_density=column, paths=paths or {}, summary=summary,
                     model=rendered.model)


def _whole_cube_mass_noise(plan):
    """Standard deviation that the noise adds to the HI mass summed over the whole cube.

    The beam-correlated noise has an autocorrelation of twice the beam's area
    (K convolved with itself), so one channel's summed flux has variance
    rms^2 n_pix (2 Omega_beam / Omega_pix) / (Omega_beam / Omega_pix)^2; channels
    are independent (large-area limit, edges neglected; common practice, no source).
    """
    grid = plan.grid
    pixels_per_beam = float((plan.beam.solid_angle / plan.grid.pixel_scale**2).decompose())
    rms_jy = plan.noise_rms.to_value(u.Jy / u.beam)
    channel_flux_jy = rms_jy * math.sqrt(grid.n_x * grid.n_y * 2 * pixels_per_beam) / pixels_per_beam
    integral = channel_flux_jy * math.sqrt(grid.n_chan) * grid.channel_width.to_value(u.Hz) * u.Jy * u.Hz
    return hi_mass_from_flux(integral, plan.distances.luminosity_distance).to(u.Msun)


def _write_outputs(result, plan, *, overwrite):
    write_cube(result.cube, result.paths["cube"], overwrite=overwrite, config_text=plan.config.to_toml())
    write_maps(result.paths, moment0=result.moment0, column_density=result.column_density, grid=plan.grid,
               beam=plan.beam, velocity=result.summary["velocity"], profile=result.summary["profile"],
               config=plan.config, overwrite=overwrite)


def write_maps(paths, *, moment0, column_density, grid, beam, velocity, profile, config, overwrite):
    """Write the moment-0 and column-density maps and the preview PNG that ``paths`` names.

    Parameters
    ----------
    paths : dict of str to pathlib.Path
        From `output_paths`; kinds other than "moment0", "column_density"
        and "preview" are ignored.
    moment0, column_density : `~astropy.units.Quantity`, shape (n_y, n_x)
        The maps.
    grid : `~pipeline.geometry.GridSpec`
    beam : `~pipeline.instrument.BeamSpec`
    velocity, profile : `~astropy.units.Quantity`, shape (n_chan,)
        Channel velocities and global line profile, for the preview.
    config : RunConfig
        Stored in the FITS files; names the preview.
    overwrite : bool
        Replace existing files.
    """
    image_wcs, text = make_image_wcs(grid), config.to_toml()
    column = column_density.to(u.cm**-2)
    if "moment0" in paths:
        write_image(moment0.value, image_wcs, moment0.unit, paths["moment0"], beam=beam, overwrite=overwrite,
                    config_text=text)
        write_image(column.value, image_wcs, column.unit, paths["column_density"], beam=beam, overwrite=overwrite,
                    config_text=text)
    if "preview" in paths:
        with atomic_output(paths["preview"], overwrite=overwrite) as partial:
            plot_preview(column, image_wcs, velocity, profile, partial, beam=beam,
                         title=f"{config['output.name']}: HI column density and line profile")

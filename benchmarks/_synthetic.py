"""A demo-like synthetic disc in pixel and channel units, generated chunk by chunk (benchmarks only).

The disc is drawn directly in the deposit's units so the benchmarks time the
deposit and nothing else: positions in pixels, smoothing lengths in pixels,
line centres and widths in channels.  Each chunk comes from its own seeded
stream, so a snapshot of any size is produced on the fly and never held whole.

Model (invented; common practice for a benchmark, no source)
------------------------------------------------------------
* 99.8 % of the particles in an exponential disc (scale length ``n_x / 10``,
  truncated at ``0.45 n_x``, sech^2 scale height a tenth of the scale
  length), inclined by 60 degrees, major axis at 30 degrees from x; the
  smoothing length follows the local density, ``h = 0.3 px (rho_0 / rho)^(1/3)``.
* 0.2 % in a diffuse envelope, uniform in area out to ``0.45 n_x`` with
  log-uniform ``h`` from 3 to 30 pixels.
* Every ``h`` clipped to [0.3, 30] pixels.  Line centres follow a rising
  rotation curve reaching ``0.35 n_chan`` channels in projection; Gaussian line
  sigmas uniform in [2, 6] channels (thermal plus turbulent widths of a
  21-cm disc at a few km/s per channel); weights uniform in [0.5, 1.5].
"""

import math

import numpy as np

H_MIN_PIX = 0.3
H_MAX_PIX = 30.0
DISC_FRACTION = 0.998
INCLINATION = math.radians(60.0)
MAJOR_AXIS_ANGLE = math.radians(30.0)


def disc_chunk(n_particles, array_shape, *, seed):
    """Return one chunk of the synthetic disc as a dict of deposit_particles arguments (float64)."""
    n_chan, n_y, n_x = array_shape
    rng = np.random.default_rng(seed)
    scale_length = 0.1 * n_x
    scale_height = 0.1 * scale_length
    edge = 0.45 * n_x
    n_disc = rng.binomial(n_particles, DISC_FRACTION)
    n_envelope = n_particles - n_disc

    # Exponential disc: R ~ Gamma(2, R_d), redrawn beyond the edge.
    radius_disc = rng.gamma(2.0, scale_length, n_disc)
    beyond = radius_disc > edge
    while beyond.any():
        radius_disc[beyond] = rng.gamma(2.0, scale_length, int(beyond.sum()))
        beyond = radius_disc > edge
    height = scale_height * np.arctanh(rng.uniform(-0.999999, 0.999999, n_disc))
    density = np.exp(-radius_disc / scale_length) / np.cosh(height / scale_height) ** 2
    h_disc = H_MIN_PIX * density ** (-1.0 / 3.0)

    radius_envelope = edge * np.sqrt(rng.uniform(0.0, 1.0, n_envelope))
    h_envelope = np.exp(rng.uniform(math.log(3.0), math.log(H_MAX_PIX), n_envelope))

    radius = np.concatenate([radius_disc, radius_envelope])
    z = np.concatenate([height, rng.normal(0.0, 3.0 * scale_height, n_envelope)])
    h_pix = np.clip(np.concatenate([h_disc, h_envelope]), H_MIN_PIX, H_MAX_PIX)
    azimuth = rng.uniform(0.0, 2.0 * math.pi, n_particles)

    # Disc frame -> sky: incline about the major axis, then turn the major axis.
    along = radius * np.cos(azimuth)
    across = radius * np.sin(azimuth) * math.cos(INCLINATION) - z * math.sin(INCLINATION)
    cos_pa, sin_pa = math.cos(MAJOR_AXIS_ANGLE), math.sin(MAJOR_AXIS_ANGLE)
    x_pix = 0.5 * (n_x - 1) + 0.37 + along * cos_pa - across * sin_pa
    y_pix = 0.5 * (n_y - 1) - 0.21 + along * sin_pa + across * cos_pa

    v_max = 0.35 * n_chan / math.sin(INCLINATION)
    v_rot = v_max * (1.0 - np.exp(-radius / (0.5 * scale_length)))
    chan_centre = (0.5 * (n_chan - 1) + v_rot * math.sin(INCLINATION) * np.cos(azimuth)
                   + rng.normal(0.0, 1.0, n_particles))
    order = rng.permutation(n_particles)  # snapshots are not sorted on the sky
    return dict(x_pix=x_pix[order], y_pix=y_pix[order], h_pix=h_pix[order],
                chan_centre=chan_centre[order], chan_sigma=rng.uniform(2.0, 6.0, n_particles),
                weight=rng.uniform(0.5, 1.5, n_particles))


def disc_chunks(n_particles, array_shape, *, chunk_particles, seed=2026):
    """Yield the synthetic disc in chunks of at most ``chunk_particles``, each from its own stream."""
    for index, start in enumerate(range(0, n_particles, chunk_particles)):
        yield disc_chunk(min(chunk_particles, n_particles - start), array_shape, seed=(seed, index))

"""Memory plan: in RAM under the budget, memory-mapped above it, refused below one chunk; same cube either way."""

import gc
import re
import subprocess
import sys
import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from cli_calls import one_error_line, run_cli
from pipeline.chain import plan_run, run
from pipeline.config import load_config
from pipeline.errors import MemoryBudgetError, ParticlesOutsideFieldWarning
from pipeline.memory_plan import plan_memory

SHAPE = (128, 512, 512)
COMMON = dict(beam_major_pixels=5.0, chunk_particles=100_000, threads=2, scratch_directory="scratch")


def _config(small_run_config, tmp_path, *overrides):
    return load_config(small_run_config(), overrides=[f"run.scratch_directory='{tmp_path / 'scratch'}'",
                                                      *overrides])


def test_cube_stays_in_ram_when_it_fits_and_is_memory_mapped_when_not():
    roomy = plan_memory(SHAPE, budget=8 * u.GiB, **COMMON)
    tight = plan_memory(SHAPE, budget=0.5 * u.GiB, **COMMON)
    assert not roomy.memory_mapped and roomy.scratch == 0 * u.MiB and roomy.scratch_directory is None
    assert tight.memory_mapped and str(tight.scratch_directory) == "scratch"
    # The float64 accumulator and the float32 beam output coexist: 12 bytes per voxel, in RAM or on disk.
    assert tight.scratch.to_value(u.byte) == 12 * np.prod(SHAPE)
    assert_quantity_allclose(roomy.peak_memory - tight.peak_memory, tight.scratch, rtol=1e-12)
    assert tight.peak_memory <= 0.5 * u.GiB


def test_memory_mapped_peak_follows_the_chunk_not_the_cube():
    small = plan_memory((16, 512, 512), budget=360 * u.MiB, **COMMON)
    large = plan_memory((4096, 512, 512), budget=360 * u.MiB, **COMMON)
    assert small.memory_mapped and large.memory_mapped and small.peak_memory == large.peak_memory
    bigger_chunks = plan_memory((4096, 512, 512), budget=2 * u.GiB,
                                **{**COMMON, "chunk_particles": 4_000_000})
    assert_quantity_allclose(bigger_chunks.peak_memory - large.peak_memory,
                             bigger_chunks.chunk_memory - large.chunk_memory, rtol=1e-12)


def test_budget_below_one_chunk_is_refused_with_the_minimum_and_the_minimum_is_enough():
    with pytest.raises(MemoryBudgetError, match=r"too small even with the 128 x 512 x 512 cube memory-mapped") as err:
        plan_memory(SHAPE, budget=100 * u.MiB, budget_place="galaxy.toml:run.memory_budget", **COMMON)
    message = str(err.value)
    assert message.startswith("galaxy.toml:run.memory_budget: ")
    assert "snapshot chunk of 100000 particles" in message and "lower snapshot.chunk_particles" in message
    minimum = float(re.search(r"the minimum is ([0-9.]+) MiB", message).group(1)) * u.MiB
    assert plan_memory(SHAPE, budget=minimum + 1 * u.MiB, **COMMON).memory_mapped


def test_without_memory_maps_a_cube_over_budget_is_refused():
    with pytest.raises(MemoryBudgetError, match=r"^run.memory_budget: the run needs about .* more than"):
        plan_memory(SHAPE, budget=0.5 * u.GiB, allow_memory_map=False, **COMMON)


@pytest.mark.parametrize("unit", ["Jy/beam", "K"])
def test_memory_mapped_run_gives_the_same_cube_and_leaves_no_scratch(small_run_config, tmp_path, unit):
    # Same arithmetic on a memory map as in RAM: the two cubes must be bitwise equal.
    grid = ["grid.n_x=160", "grid.n_y=160", f"emission.unit='{unit}'"]
    in_ram = _config(small_run_config, tmp_path, *grid)
    in_ram_plan = plan_run(in_ram)
    assert not in_ram_plan.memory.memory_mapped
    cube_bytes = 12 * np.prod(in_ram_plan.grid.array_shape) * u.byte
    budget = (in_ram_plan.peak_memory - cube_bytes / 2).to(u.MiB)
    mapped = in_ram.replace([f"run.memory_budget='{budget.value:.3f} MiB'"])
    assert plan_run(mapped).memory.memory_mapped
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ParticlesOutsideFieldWarning)   # the small snapshot spills out of band
        expected = run(in_ram, write=False)
        got = run(mapped, write=True, overwrite=True)
    assert type(got.cube.data.base).__name__ == "memmap" or type(got.cube.data).__name__ == "memmap"
    assert got.cube.data.tobytes() == expected.cube.data.tobytes()
    np.testing.assert_array_equal(got.moment0, expected.moment0)
    del got
    gc.collect()
    assert list((tmp_path / "scratch").iterdir()) == []


def test_check_reports_the_plan_in_ram_and_memory_mapped(capsys, small_run_config, tmp_path):
    config = small_run_config()
    code, out, _ = run_cli(capsys, "check", config)
    assert code == 0 and re.search(r"cube memory\s+in RAM", out)
    assert re.search(r"chunk\(s\) of up to \d+, about [0-9.]+ [KMG]iB each", out)
    code, out, _ = run_cli(capsys, "check", config, "--set", "grid.n_chan=500", "--set", "grid.n_x=400",
                           "--set", "grid.n_y=400", "--set", "run.memory_budget=600 MiB")
    assert code == 0, out
    assert re.search(r"cube memory\s+memory-mapped in .*out \([0-9.]+ [KMG]iB of scratch disk during the run\)", out)
    assert re.search(r"peak memory\s+about [0-9.]+ MiB \(budget 600.0 MiB\)", out)


def test_budget_too_small_for_one_chunk_is_one_line_and_exit_2(capsys, small_run_config):
    code, _, err = run_cli(capsys, "check", small_run_config(), "--set", "run.memory_budget=50 MiB")
    line = one_error_line(err)
    assert code == 2 and line.startswith("cubewright: error: --set:run.memory_budget: 50.0 MiB is too small even with the")
    assert "the minimum is" in line


@pytest.mark.slow
def test_memory_mapped_run_keeps_anonymous_memory_under_the_estimate(small_run_config, tmp_path):
    # A child process samples its own anonymous resident memory (/proc/self/status RssAnon, Linux)
    # every 2 ms while the CLI makes a 128 x 512 x 512 cube memory-mapped; the peak must stay under
    # the plan's estimate, which is far below the 400 MiB the cube would take in RAM.
    if "RssAnon" not in Path("/proc/self/status").read_text():
        pytest.skip("needs Linux /proc/self/status")
    overrides = ["grid.n_x=512", "grid.n_y=512", "grid.n_chan=128", "grid.pixel_scale=2 arcsec",
                 "beam.major=8 arcsec", "beam.minor=8 arcsec", "output.moment0=false", "output.preview=false",
                 f"run.scratch_directory='{tmp_path / 'scratch'}'"]
    config = load_config(small_run_config(), overrides=overrides)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        in_ram = plan_run(config).memory
        budget = (in_ram.peak_memory - in_ram.peak_memory / 4).to(u.MiB)
        plan = plan_run(config.replace([f"run.memory_budget='{budget.value:.1f} MiB'"])).memory
    assert plan.memory_mapped and plan.peak_memory < in_ram.peak_memory - 350 * u.MiB
    probe = """
import sys, threading, time
peak = [0]
def sample():
    while True:
        with open('/proc/self/status') as status:
            lines = status.readlines()
        for line in lines:
            if line.startswith('RssAnon:'):
                peak[0] = max(peak[0], int(line.split()[1]) * 1024)
        time.sleep(0.002)
threading.Thread(target=sample, daemon=True).start()
from pipeline.cli import main
code = main(sys.argv[1:])
time.sleep(0.01)
print(code, peak[0])
"""
    argv = ["run", str(config.source), "--quiet", "--overwrite"]
    for item in [*overrides, f"run.memory_budget={budget.value:.1f} MiB"]:
        argv += ["--set", item]
    report = subprocess.run([sys.executable, "-W", "ignore", "-c", probe, *argv], capture_output=True, text=True,
                            check=True)
    code, peak = map(int, report.stdout.split()[-2:])
    assert code == 0, report.stderr
    assert peak <= plan.peak_memory.to_value(u.byte), (peak, plan.peak_memory)

"""Batch files: sweep expansion, refusals with file:key messages, names, uniform views."""

from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
import scipy.stats

from pipeline.batch import load_batch, uniform_sphere_views
from pipeline.batch._spec import toml_literal
from pipeline.errors import ConfigError


def test_grid_of_views_times_distances_expands_in_order(write_batch):
    path = write_batch("""
        name = "{snapshot}_i{inclination:03.0f}_pa{position_angle:03.0f}_d{distance:02.0f}"
        [sweep]
        distances = ["5 Mpc", "20 Mpc"]
        [sweep.views]
        inclinations = ["0 deg", "45 deg", "90 deg"]
        position_angles = ["10 deg", "100 deg"]
        """)
    batch = load_batch(path)
    assert len(batch.jobs) == 12
    names = [job.name for job in batch.jobs]
    assert names[:3] == ["snapshot_i000_pa010_d05", "snapshot_i000_pa010_d20", "snapshot_i000_pa100_d05"]
    config = batch.job_config(batch.jobs[5])
    assert u.isclose(config["geometry.inclination"], 45 * u.deg)
    assert u.isclose(config["geometry.position_angle"], 10 * u.deg)
    assert u.isclose(config["observer.distance"], 20 * u.Mpc)
    assert config["output.directory"] == batch.output_dir and config["output.name"] == names[5]
    assert len({job.digest for job in batch.jobs}) == 12


def test_pairs_instruments_and_swept_keys_become_overrides(write_batch):
    path = write_batch("""
        name = "i{inclination:02.0f}_{instrument}_{noise_integration_time}"
        [sweep.views]
        pairs = [["30 deg", "0 deg"], ["60 deg", "90 deg"]]
        [sweep.instruments.wide.beam]
        major = "60 arcsec"
        minor = "50 arcsec"
        [sweep.instruments.sharp]
        "beam.major" = "40 arcsec"
        [sweep.keys.noise]
        integration_time = ["2 h", "8 h"]
        """)
    batch = load_batch(path)
    assert len(batch.jobs) == 2 * 2 * 2
    job = next(job for job in batch.jobs if job.name == "i60_wide_8 h")
    config = batch.job_config(job)
    assert u.isclose(config["beam.major"], 60 * u.arcsec) and u.isclose(config["beam.minor"], 50 * u.arcsec)
    assert u.isclose(config["noise.integration_time"], 8 * u.h)
    assert job.parameters["instrument"] == "wide" and job.parameters["noise_integration_time"] == "8 h"


def test_swept_paths_start_at_the_batch_files_folder(write_batch, tmp_path):
    # The batch file lives one folder below the base run config: its relative paths are its own.
    (tmp_path / "sweeps").mkdir()
    base = write_batch().read_text().replace('run_config = "', 'run_config = "../')
    path = tmp_path / "sweeps" / "batch.toml"
    path.write_text(base + 'name = "{index}"\n[sweep.keys.run]\nscratch_directory = ["scratch_a", "/abs/b"]\n')
    batch = load_batch(path)
    folders = [batch.job_config(job)["run.scratch_directory"] for job in batch.jobs]
    assert folders == [(tmp_path / "sweeps" / "scratch_a").resolve(), Path("/abs/b").resolve()]
    assert batch.jobs[0].parameters["run_scratch_directory"] == "scratch_a"
    path.write_text(base + 'name = "{instrument}"\n[sweep.instruments.fast.run]\nscratch_directory = "fast"\n')
    batch = load_batch(path)
    assert batch.job_config(batch.jobs[0])["run.scratch_directory"] == (tmp_path / "sweeps" / "fast").resolve()


def test_redshifts_replace_the_base_distance(write_batch):
    batch = load_batch(write_batch('name = "z{redshift:.3f}"\n[sweep]\nredshifts = [0.01, 0.02]\n'))
    config = batch.job_config(batch.jobs[1])
    assert config["observer.redshift"] == 0.02 and config["observer.distance"] is None
    assert [job.name for job in batch.jobs] == ["z0.010", "z0.020"]


def test_snapshot_glob_expands_sorted_and_groups_jobs_by_snapshot(write_batch, make_snapshot):
    make_snapshot(50, name="run_b.h5")
    make_snapshot(50, name="run_a.h5")
    batch = load_batch(write_batch('name = "{snapshot}_{view}"\n[sweep]\nsnapshots = ["run_*.h5"]\n'
                                   '[sweep.views]\nrandom = 2\nseed = 3\n'))
    assert [job.name for job in batch.jobs] == ["run_a_0", "run_a_1", "run_b_0", "run_b_1"]
    assert batch.jobs[0].snapshot_key == batch.jobs[1].snapshot_key != batch.jobs[2].snapshot_key


@pytest.mark.parametrize("body, fragments", [
    ("nmae = 'x'\n", ["batch.toml:batch.nmae: unknown key", "'batch.name'"]),
    ("[sweep]\ndistance = ['5 Mpc']\n", ["batch.toml:sweep.distance: unknown key", "'sweep.distances'"]),
    ("[sweep]\ndistances = [5]\n", ["batch.toml:sweep.distances[0]: expected a length", "got 5",
                                    "units are never assumed"]),
    ("[sweep]\ndistances = ['5 km/s']\n", ["batch.toml:sweep.distances[0]: expected a length", "'5 km/s'"]),
    ("[sweep.views]\npairs = [['30 deg']]\n", ["batch.toml:sweep.views.pairs[0]: expected [inclination, "
                                               "position_angle]"]),
    ("[sweep.views]\npairs = [['30 deg', '3 kpc']]\n", ["sweep.views.pairs[0][1]: expected an angle"]),
    ("[sweep.views]\nrandom = 4\n", ["sweep.views.seed: expected a whole number", "got nothing"]),
    ("[sweep.views]\nrandom = 4\nseed = 1\npairs = [['1 deg', '2 deg']]\n", ["sweep.views: expected exactly one",
                                                                            "pairs and random"]),
    ("[sweep.views]\ninclinations = ['200 deg']\nposition_angles = ['0 deg']\n",
     ["batch.toml:sweep.views.inclinations[0]: expected a value of at most 180 deg; got '200.0 deg'"]),
    ("[sweep.keys.grid]\nn_x = 64\n", ["batch.toml:sweep.keys.grid.n_x: expected a list"]),
    ("[sweep.keys.grid]\nn_xx = [64]\n", ["sweep.keys.grid.n_xx: unknown run config key", "'grid.n_x'"]),
    ("[sweep.keys.grid]\nn_x = [64, 'many']\n", ["batch.toml:sweep.keys.grid.n_x[1]: expected an integer, e.g. 64; "
                                                  "got 'many'"]),
    ("[sweep.instruments.a.grid]\nn_x = -1\n[sweep.keys.beam]\nminor = ['30 arcsec']\n",
     ["batch.toml:sweep.instruments.a.grid.n_x: expected a value of at least 1; got -1"]),
    ("[sweep.instruments.narrow.beam]\nmajor = '20 arcsec'\n",
     ["batch.toml:sweep.instruments.narrow.beam.major: expected at least beam.minor (36.0 arcsec); got 20.0 arcsec"]),
    ("[sweep]\nredshifts = [0.01]\n[sweep.keys.observer]\nsystemic_velocity = ['600 km/s']\n",
     ["batch.toml:sweep.keys.observer.systemic_velocity[0]: cannot be combined with observer.redshift"]),
    ("[sweep.views]\npairs = [['30 deg', '10 deg'], ['190 deg', '0 deg']]\n",
     ["batch.toml:sweep.views.pairs[1][0]: expected a value of at most 180 deg; got '190.0 deg'"]),
    ("[sweep]\ndistances = ['-2 Mpc']\n", ["batch.toml:sweep.distances[0]: expected a value greater than 0"]),
    ("[sweep.instruments.wide.output]\nname = 'x'\n", ["sweep.instruments.wide.output.name: expected a run key "
                                                       "other than output.*"]),
    ("[sweep]\nredshifts = [0.1]\ndistances = ['1 Mpc']\n", ["sweep.redshifts: expected distances or redshifts"]),
    ("detection_threshold = -1\n", ["batch.detection_threshold: expected a number greater than 0", "got -1"]),
    ("[cluster]\nkind = 'lsf'\n", ["batch.toml:cluster.kind: expected one of 'slurm', 'pbs'", "'lsf'"]),
    ("[cluster]\nkind = 'slurm'\ncores = 'eight'\n", ["cluster.cores: expected a whole number"]),
    ("[cluster]\nkind = 'slurm'\nqueu = 'x'\n", ["cluster.queu: unknown key", "'cluster.queue'"]),
    ("[cluster]\nkind = 'slurm'\nmemory = '8 km'\n", ["cluster.memory: expected an amount of memory"]),
    ("[cluster]\ncores = 2\n", ["cluster.kind: expected one of 'slurm', 'pbs'; got nothing"]),
    ("[cluster]\nkind = 'slurm'\njob_extra_directives = '-x'\n", ["cluster.job_extra_directives: expected a list"]),
    ("[cluster]\nkind = 'slurm'\nqueue = 3\n", ["cluster.queue: expected a queue or partition name", "got 3"]),
    ("[sweep.views]\ninclinations = ['1 deg']\n", ["sweep.views.position_angles: expected a list of angles"]),
    ("[sweep.views]\npairs = [['1 deg', '2 deg']]\nseed = 1\n", ["sweep.views.seed: expected only with random"]),
    ("[sweep.views]\nrandom = 2\nseed = 1\nhemisphere = 'yes'\n", ["sweep.views.hemisphere: expected true or false"]),
    ("[sweep.views]\nrandom = 0\nseed = 1\n", ["sweep.views.random: expected a whole number at least 1; got 0"]),
    ("[sweep]\ninstruments = {}\n", ["sweep.instruments: expected at least one [sweep.instruments.NAME]"]),
    ("[sweep]\nsnapshots = ['snapshot.h5', 'snapshot.h5']\n", ["sweep.snapshots: expected each snapshot once"]),
    ("[sweep]\nsnapshots = 'snapshot.h5'\n", ["sweep.snapshots: expected a list of at least 1 value(s)"]),
    ("[sweep]\nredshifts = ['0.1']\n", ["sweep.redshifts[0]: expected a number, e.g. 5.0; got '0.1'"]),
    ("[sweep]\nviews = 3\n", ["sweep.views: expected a table ([sweep.views]); got 3"]),
    ("[sweep]\nxyzzy = 1\n", ["sweep.xyzzy: unknown key; the valid keys are: snapshots"]),
    ("[sweep.keys]\nxyzzy = [1]\n", ["sweep.keys.xyzzy: unknown run config key 'xyzzy'"]),
    ("name = ''\n", ["batch.name: expected a non-empty string; got ''"]),
    ("name = 'a{'\n", ["batch.name: expected a template such as"]),
])
def test_bad_batch_keys_are_refused_with_file_key_and_what_was_got(write_batch, body, fragments):
    with pytest.raises(ConfigError) as info:
        load_batch(write_batch(body))
    for fragment in fragments:
        assert fragment in str(info.value), str(info.value)
    assert "--set" not in str(info.value)  # a swept value is named by its batch key, not as a command-line override


def test_a_glob_matching_nothing_is_refused(write_batch):
    with pytest.raises(ConfigError, match=r"sweep.snapshots\[0\]: expected a pattern matching snapshot files; "
                                          r"got 'missing_\*.h5', which matches no file"):
        load_batch(write_batch("[sweep]\nsnapshots = ['missing_*.h5']\n"))


def test_a_missing_snapshot_path_is_refused(write_batch):
    with pytest.raises(ConfigError, match=r"sweep.snapshots\[0\]: expected an existing snapshot file; got 'no.h5'"):
        load_batch(write_batch("[sweep]\nsnapshots = ['no.h5']\n"))


def test_a_template_giving_two_jobs_one_name_is_refused_naming_both(write_batch):
    with pytest.raises(ConfigError, match=r"batch.name: expected a distinct name for every job; got 'g_i30' for "
                                          r"job 0 \(.*position_angle=0.0.*\) and job 1 .*position_angle=90.0"):
        load_batch(write_batch("name = 'g_i{inclination:.0f}'\n[sweep.views]\n"
                               "pairs = [['30 deg', '0 deg'], ['30 deg', '90 deg']]\n"))


@pytest.mark.parametrize("template", ["../{snapshot}_{index}", "/tmp/{index}", "{snapshot}/../../x{index}"])
def test_a_template_escaping_the_output_folder_is_refused(write_batch, template):
    with pytest.raises(ConfigError, match=r"batch.name: expected names inside the output folder .* which leads "
                                          r"outside it"):
        load_batch(write_batch(f"name = '{template}'\n"))


def test_a_template_field_that_no_job_has_is_refused_with_the_nearest(write_batch):
    with pytest.raises(ConfigError, match=r"batch.name: .*got '\{inclinaton\}', which is not one; did you mean "
                                          r"'\{inclination\}'\?"):
        load_batch(write_batch("name = '{inclinaton}'\n"))


def test_a_template_format_that_fails_is_refused(write_batch):
    with pytest.raises(ConfigError, match=r"batch.name: expected a template that formats every job; .*fails for "
                                          r"job 0"):
        load_batch(write_batch("name = '{instrument:03.0f}'\n"))


def test_sub_folders_in_names_go_into_output_directory(write_batch):
    batch = load_batch(write_batch("name = '{snapshot}/i{inclination:.0f}'\n"))
    config = batch.job_config(batch.jobs[0])
    assert config["output.directory"] == batch.output_dir / "snapshot" and config["output.name"] == "i30"


def test_digest_changes_with_any_job_setting_and_not_otherwise(write_batch, tmp_path):
    first = load_batch(write_batch("[sweep]\ndistances = ['5 Mpc']\n"))
    again = load_batch(write_batch("[sweep]\ndistances = ['5 Mpc']\n"))
    other = load_batch(write_batch("[sweep]\ndistances = ['6 Mpc']\n"))
    assert first.digest == again.digest != other.digest


def test_uniform_views_pass_a_kolmogorov_smirnov_test_on_cos_i(rng):
    # Uniform directions on the sphere have cos i ~ U(-1, 1) (Archimedes' hat-box theorem); test it with
    # the one-sample Kolmogorov-Smirnov test (Kolmogorov 1933; Smirnov 1948) through scipy.stats.kstest.
    inclination, position_angle = uniform_sphere_views(4000, seed=int(rng.integers(2**31)))
    assert scipy.stats.kstest(np.cos(inclination), scipy.stats.uniform(loc=-1, scale=2).cdf).pvalue > 0.01
    assert scipy.stats.kstest(position_angle.to_value(u.deg), scipy.stats.uniform(loc=0, scale=360).cdf).pvalue > 0.01
    half, _ = uniform_sphere_views(4000, seed=5, hemisphere=True)
    assert scipy.stats.kstest(np.cos(half), scipy.stats.uniform(loc=0, scale=1).cdf).pvalue > 0.01
    # The same test must reject inclinations drawn uniform in angle (not uniform on the sphere).
    wrong = rng.uniform(0, np.pi, 4000)
    assert scipy.stats.kstest(np.cos(wrong), scipy.stats.uniform(loc=-1, scale=2).cdf).pvalue < 1e-6


def test_random_views_repeat_with_the_seed(write_batch):
    body = "name = 'v{view}'\n[sweep.views]\nrandom = 3\nseed = 11\n"
    first, second = load_batch(write_batch(body)), load_batch(write_batch(body))
    assert [job.overrides for job in first.jobs] == [job.overrides for job in second.jobs]


def test_toml_literal_round_trips_through_tomllib():
    import tomllib

    for value in ["a \"quoted\" \\ path", 3, 2.5, True, ["1 kpc", 2, [False]]]:
        assert tomllib.loads(f"v = {toml_literal(value)}")["v"] == value
    with pytest.raises(TypeError, match="must be a TOML string"):
        toml_literal(object())


def test_the_example_batch_config_expands_and_validates(tmp_path, make_snapshot):
    import shutil
    from pathlib import Path

    import pipeline

    configs = Path(pipeline.__file__).resolve().parents[1] / "configs"
    (tmp_path / "configs").mkdir()
    for name in ("batch.toml", "single_cube.toml"):
        shutil.copy(configs / name, tmp_path / "configs" / name)
    (tmp_path / "cubewright-demo").mkdir()
    make_snapshot(50, name="cubewright-demo/disc_galaxy.h5")
    batch = load_batch(tmp_path / "configs" / "batch.toml")
    assert len(batch.jobs) == 2 * 3 * 2
    assert batch.jobs[0].name == "disc_galaxy_i020_pa120_d08.5_compact"
    assert batch.output_dir == tmp_path / "configs" / "batch_output"


@pytest.mark.parametrize("content, fragment", [
    (b"[batch\n", "not valid TOML"),
    (b"\xff\xfe", "expected UTF-8 text"),
    (b"[batch]\nname = 'x'\n", "batch.run_config: expected the base run config file"),
])
def test_unreadable_batch_files_are_refused(tmp_path, content, fragment):
    path = tmp_path / "b.toml"
    path.write_bytes(content)
    with pytest.raises(ConfigError, match=fragment):
        load_batch(path)
    with pytest.raises(ConfigError, match=r"missing.toml: cannot read the batch file"):
        load_batch(tmp_path / "missing.toml")

"""The batch summary plot: axis scales and tick labels that stay readable (common practice, no source)."""

import matplotlib.pyplot as plt
import numpy as np
import pytest

from pipeline.analysis._plots import _set_value_scale, _tick_label


@pytest.mark.parametrize(("values", "scale", "minor_labels"), [
    (np.array([6.46e9, 6.57e9]), "linear", None),        # 2% apart: a log axis would show one tick
    (np.array([4.0, 300.0]), "log", True),                # under two decades: 2 and 5 labelled too
    (np.array([2.0, 3400.0]), "log", False),              # more: powers of ten only
])
def test_value_axis_is_log_only_beyond_a_decade(values, scale, minor_labels):
    figure, axis = plt.subplots()
    axis.scatter([0, 1], values)
    _set_value_scale(axis, values)
    figure.canvas.draw()
    assert axis.get_yscale() == scale
    if minor_labels is not None:
        labels = [tick.get_text() for tick in axis.get_yticklabels(minor=True) if tick.get_text()]
        assert bool(labels) == minor_labels
    plt.close(figure)


def test_tick_labels_are_plain_numbers_or_powers_of_ten():
    assert [_tick_label(value) for value in (0.5, 20.0, 3000.0)] == ["0.5", "20", "3000"]
    assert _tick_label(5e9) == r"$5\times10^{9}$"


def test_preview_names_the_column_density_map_and_its_stretch(tmp_path, monkeypatch):
    # The left panel showed N_HI under the title "Moment 0", on an unstated square-root stretch.
    import astropy.units as u
    import matplotlib.figure
    import numpy as np
    from astropy.wcs import WCS

    from pipeline.analysis import plot_preview

    seen = {}
    save = matplotlib.figure.Figure.savefig

    def spy(figure, *args, **kwargs):
        seen["titles"] = [axis.get_title() for axis in figure.axes]
        seen["labels"] = [axis.get_ylabel() for axis in figure.axes]
        return save(figure, *args, **kwargs)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", spy)
    wcs = WCS(naxis=2)
    wcs.wcs.ctype = ["RA---SIN", "DEC--SIN"]
    wcs.wcs.cdelt = [-1 / 360, 1 / 360]
    column = np.ones((12, 10)) * 1e20 * u.cm**-2
    plot_preview(column, wcs, np.linspace(-100, 100, 9) * u.km / u.s, np.ones(9) * u.Jy, tmp_path / "p.png")
    assert "HI column density" in seen["titles"]
    assert any("square-root stretch" in label for label in seen["labels"])

"""Figures (matplotlib, Agg backend): what people would rather look at than read.

Every function takes already-computed arrays or result objects and writes one PNG
atomically; none computes physics.
"""

from .io_output import atomic_path

__all__ = ["figure", "save", "plot_background"]


def figure(nrows=1, ncols=1, **kw):
    """A new figure and axes on the non-interactive Agg backend."""
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt.subplots(nrows, ncols, **kw)


def save(fig, path, overwrite=True):
    """Write ``fig`` to ``path`` (PNG) atomically and close it."""
    import matplotlib.pyplot as plt

    with atomic_path(path, overwrite=overwrite) as tmp:
        fig.savefig(tmp, format="png", dpi=120, bbox_inches="tight")
    plt.close(fig)
    return path


def plot_background(t_gyr, a_of_t, a, d1, f1, title, path, fate_note=""):
    """Expansion history a(t) (both branches if it recollapses) and D1(a), f1(a): two panels."""
    fig, (ax1, ax2) = figure(1, 2, figsize=(10, 4))
    ax1.plot(t_gyr, a_of_t, color="k")
    ax1.set_xlabel("cosmic time t [Gyr]")
    ax1.set_ylabel("scale factor a")
    ax1.set_title("expansion history" + (f" ({fate_note})" if fate_note else ""))
    ax1.grid(alpha=0.3)
    ax2.loglog(a, d1, label="D1 (D1(a=1) = 1)")
    ax2.set_xlabel("scale factor a")
    ax2.set_ylabel("D1")
    ax3 = ax2.twinx()
    ax3.semilogx(a, f1, color="C1", label="f1 = dlnD1/dlna")
    ax3.set_ylabel("f1", color="C1")
    ax2.set_title("linear growth")
    ax2.grid(alpha=0.3, which="both")
    h1, l1 = ax2.get_legend_handles_labels()
    h2, l2 = ax3.get_legend_handles_labels()
    ax2.legend(h1 + h2, l1 + l2, loc="lower right")
    fig.suptitle(title)
    return save(fig, path)

"""The kernel registry: one entry per kernel kind, used by the views, the CLI and the report.

Each kernel kind has

* a settings name (the class name, the ``"kernel"`` entry of ``kernel.settings()``),
* a short name for widget choices and the command line (``"hmc"``, ``"walk"``, ...),
* a human title, its class, its defining knobs (those a saved kernel must state)
  with their labels, and its default target acceptance.

``kernel_from_settings`` lives here, so ``kernels.py`` never imports the
modules that subclass its ``Kernel`` (no import cycle).
"""

from dataclasses import dataclass

from .gibbs import Gibbs
from .kernels import HMC, PartialRefreshHMC, RandomWalk
from .metric import Metric
from .nuts import NUTS
from .uniforms import DriftingUniform, FreshUniform

__all__ = ["KernelKind", "KERNEL_KINDS", "SHORT_NAMES", "KNOB_LABELS", "kernel_kind",
           "kernel_from_settings"]

#: Label of every kernel knob, the same in every view, the CLI and the report.
KNOB_LABELS = {
    "step_size": "step size",
    "n_steps": "leapfrog steps",
    "persistence": "persistence",
    "scale": "proposal scale",
    "max_depth": "max tree depth",
    "max_energy_error": "max energy error",
    "jitter": "step-size jitter",
}


@dataclass(frozen=True)
class KernelKind:
    """One kernel kind.

    Attributes
    ----------
    name : str
        Settings name (``kernel.settings()["kernel"]``), also the class name.
    short : str
        Name of the choice in widgets and on the command line.
    title : str
        Human title (dropdowns, figure titles, the report).
    cls : type
        The kernel class.
    knobs : tuple of str
        Defining knobs: a saved kernel must state them (no default is a safe guess).
    positional : tuple of str
        Knobs the class takes positionally (for ``kernel_from_settings``).
    """

    name: str
    short: str
    title: str
    cls: type
    knobs: tuple
    positional: tuple

    @property
    def labels(self):
        """{knob: label} of the defining knobs."""
        return {k: KNOB_LABELS[k] for k in self.knobs}

    @property
    def target_accept(self):
        """Default warm-up target acceptance of this kind."""
        return self.cls.default_target_accept

    @property
    def tuned_knob(self):
        return self.cls.tuned_knob


#: Every kernel kind, in the order widgets list them.
KERNEL_KINDS = (
    KernelKind("HMC", "hmc", "HMC", HMC, ("step_size", "n_steps"), ("step_size", "n_steps")),
    KernelKind("PartialRefreshHMC", "partial", "HMC with partial momentum refresh", PartialRefreshHMC,
               ("step_size", "n_steps", "persistence"), ("step_size",)),
    KernelKind("RandomWalk", "walk", "random-walk Metropolis", RandomWalk, ("scale",), ("scale",)),
    KernelKind("NUTS", "nuts", "no-U-turn sampler", NUTS, ("step_size",), ("step_size",)),
    KernelKind("Gibbs", "gibbs", "Gibbs", Gibbs, (), ()),
)

#: Short names of every kind, in registry order.
SHORT_NAMES = tuple(k.short for k in KERNEL_KINDS)

_BY_NAME = {k.name: k for k in KERNEL_KINDS}
_BY_SHORT = {k.short: k for k in KERNEL_KINDS}


def kernel_kind(which, *, among=None):
    """The registry entry of a short name, a settings name, a kernel class or a kernel.

    Parameters
    ----------
    which : str, type or Kernel
    among : sequence of str, optional
        Short names allowed here (a view may offer fewer kinds); all by default.

    Examples
    --------
    >>> kernel_kind("walk").knobs
    ('scale',)
    >>> kernel_kind("PartialRefreshHMC").short
    'partial'
    """
    allowed = SHORT_NAMES if among is None else tuple(among)
    entry = None
    if isinstance(which, str):
        entry = _BY_SHORT.get(which) or _BY_NAME.get(which)
    else:
        cls = which if isinstance(which, type) else type(which)
        # the most derived registered class (PartialRefreshHMC before HMC)
        for k in KERNEL_KINDS:
            if cls is k.cls:
                entry = k
                break
        else:
            for k in KERNEL_KINDS:
                if issubclass(cls, k.cls):
                    entry = k
                    break
    if entry is None or entry.short not in allowed:
        raise ValueError(f"the kernel kind must be one of {allowed}, got {which!r}")
    return entry


def _uniform_from_settings(uniform):
    if not isinstance(uniform, dict):
        raise ValueError(f"`settings['uniform']` must be a dict such as {{'kind': 'fresh'}}, "
                         f"got {uniform!r}")
    kind = uniform.get("kind")
    if kind == "fresh":
        return FreshUniform()
    if kind == "drifting":
        if "drift" not in uniform:
            raise ValueError("`settings['uniform']` of kind 'drifting' must give 'drift'")
        return DriftingUniform(uniform["drift"], uniform.get("jitter", 0.0))
    raise ValueError(f"`settings['uniform']['kind']` must be 'fresh' or 'drifting', got {kind!r}")


def kernel_from_settings(settings):
    """Rebuild a kernel from ``kernel.settings()`` (for saved widget settings and reports).

    Knobs that define the method (step size, steps, persistence, the drifting
    uniform's drift) must be present; optional ones (jitter, the largest energy
    error before a divergence, the metric) take their defaults.
    """
    if not isinstance(settings, dict):
        raise TypeError(f"`settings` must be a dict (from kernel.settings() or json.load), got "
                        f"{type(settings).__name__}")
    settings = dict(settings)
    name = settings.pop("kernel", None)
    if name not in _BY_NAME:
        raise ValueError(f"`settings['kernel']` must be one of {sorted(_BY_NAME)}, got {name!r}")
    entry = _BY_NAME[name]
    metric = settings.pop("metric", None)
    if metric is not None:
        settings["metric"] = Metric(metric.get("inverse_mass"))
    uniform = settings.pop("uniform", None)
    if uniform is not None:
        settings["uniform"] = _uniform_from_settings(uniform)
    if entry.cls is Gibbs:
        return Gibbs.from_settings(settings)
    missing = [k for k in entry.knobs if k not in settings]
    if missing:
        raise ValueError(f"`settings` for a {name} kernel must give {missing} (saved settings "
                         f"are incomplete); known keys: {sorted(settings)}")
    positional = [settings.pop(a) for a in entry.positional]
    try:
        return entry.cls(*positional, **settings)
    except TypeError as exc:  # an unknown key: say which
        raise ValueError(f"`settings` for a {name} kernel has a key it does not know: {exc}") from None

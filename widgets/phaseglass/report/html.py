"""``report.html``: the page template (``page.html``) filled with ``string.Template``.

Every value that comes from the run, the model or the user is escaped here;
the template holds the page's fixed structure and style.
"""

import base64
import html
from importlib import resources
from string import Template

import numpy as np

from ..core.registry import KNOB_LABELS, kernel_kind
from ..core.run import CAUTION, EBFMI_LIMIT, ESS_PER_CHAIN_LIMIT, RHAT_LIMIT
from .decide import FIGURE_NAMES
from .render import ANIMATION_CAPTION

__all__ = ["page"]

_e = html.escape

_FIGURE = Template('<figure id="fig-$name"><img alt="$alt" src="data:$mime;base64,$data">'
                   "<figcaption>$caption</figcaption></figure>")

_ALL_CLEAR = ('<p class="ok">\u2713 No problem detected by these checks (divergences, '
              f"E-BFMI below {EBFMI_LIMIT}, R-hat above {RHAT_LIMIT}, ESS below "
              f"{ESS_PER_CHAIN_LIMIT} per chain). That is not proof of convergence.</p>")

_FLAG_LEGEND = (f"\u26a0 marks R-hat above {RHAT_LIMIT} or ESS below {ESS_PER_CHAIN_LIMIT} per "
                "chain, the levels Vehtari et al. (2021, Bayesian Analysis 16(2)) recommend.")

_RUN_TITLES = {
    "draws_per_chain": "draws per chain", "lowest_bulk_ess": "lowest bulk ESS",
    "ess_per_gradient": "lowest bulk ESS per gradient evaluation",
    "ebfmi": "E-BFMI per chain", "gradient_evaluations": "gradient evaluations",
}


def _template():
    return Template(resources.files(__package__).joinpath("page.html").read_text(encoding="utf-8"))


def _fmt(v, kind=None):
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "n/a"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}"
    if isinstance(v, (float, np.floating)):
        if kind == "ess":
            return f"{v:,.0f}"
        return f"{v:.4g}"
    if isinstance(v, (list, tuple)):
        return ", ".join(_fmt(x) for x in v)
    if isinstance(v, dict):
        return "; ".join(f"{k}={_fmt(x)}" for k, x in v.items())
    return str(v)


def _table(rows, head=None, cls=None, titles=None):
    """An HTML table; a cell already starting with ``<td`` is kept as it is, others are escaped.
    ``titles`` gives each heading a tooltip."""
    out = [f'<table class="{cls}">' if cls else "<table>"]
    if head:
        titles = titles or [None] * len(head)
        out.append("<tr>" + "".join(f'<th title="{_e(t)}">{_e(h)}</th>' if t else f"<th>{_e(h)}</th>"
                                    for h, t in zip(head, titles)) + "</tr>")
    for row in rows:
        out.append("<tr>" + "".join(c if c.startswith("<td") else f"<td>{_e(c)}</td>" for c in row)
                   + "</tr>")
    out.append("</table>")
    return "\n".join(out)


def _parameters(digest, parameters, n_chains):
    specs = digest.column_specs
    rows = []
    for name, cells in parameters.items():
        row = [name]
        for c in specs:
            v = cells[c.key]
            if c.needs_attention(v, n_chains):
                row.append(f'<td class="flag">\u26a0 {_e(_fmt(v, c.kind))}</td>')
            else:
                row.append(_fmt(v, c.kind))
        rows.append(row)
    head = ["parameter"] + [c.heading(digest.probs) for c in specs]
    titles = [None] + [c.describe(digest.probs) for c in specs]
    return _table(rows, head, titles=titles)


def _columns(digest):
    items = "".join(f"<dt>{_e(c.heading(digest.probs))}</dt><dd>{_e(c.describe(digest.probs))} "
                    f"(<code>{_e(c.key)}</code> in summary.json)</dd>" for c in digest.column_specs)
    return f'<dl class="columns">{items}</dl>'


def _settings(summary):
    parts = []
    rows = [[str(k), _fmt(v)] for k, v in (summary["settings"] or {}).items()]
    if rows:
        parts.append(_table(rows, ["setting", "value"], cls="kv"))
    kern = dict(summary["kernel_after_warmup"] or {})
    if kern:
        try:  # the registry's title and knob labels; the summary.json key beside each label
            title = kernel_kind(kern.pop("kernel", None)).title
        except ValueError:
            title = None
        what = f": {_e(title)}" if title else ""
        parts.append(f"<p>Kernel after warm-up (what the draws below used){what}</p>")
        rows = [[f"{KNOB_LABELS[k]} ({k})" if k in KNOB_LABELS else str(k), _fmt(v)]
                for k, v in kern.items()]
        parts.append(_table(rows, ["knob", "value"], cls="kv"))
    return "\n".join(parts)


def _figures(images, captions, animation):
    parts = []
    for name in FIGURE_NAMES:
        if name in images:
            parts.append(_FIGURE.substitute(
                name=name, alt=_e(name), mime="image/png", caption=_e(captions[name]),
                data=base64.b64encode(images[name]).decode("ascii")))
    if animation is not None:
        parts.append(_FIGURE.substitute(
            name="animation", alt="chain animation", mime="image/gif",
            caption=_e(ANIMATION_CAPTION), data=base64.b64encode(animation).decode("ascii")))
    return "\n".join(parts)


def page(digest, summary, images, captions, *, n_chains, notes, animation=None):
    """The whole self-contained page.

    Parameters
    ----------
    digest : Digest
    summary : dict
        What ``summary.json`` holds.
    images : dict {name: PNG bytes}
    captions : dict {name: str}
    n_chains : int
    notes : list of str
        Views left out and why.
    animation : bytes, optional
        The GIF to embed.

    Returns
    -------
    str
    """
    model = summary["model"]
    d = summary["diagnostics"]
    if digest.warnings:
        warnings = ('<ul class="warn">' + "".join(f"<li>\u26a0 {_e(w)}</li>" for w in digest.warnings)
                    + "</ul>")
    else:
        warnings = _ALL_CLEAR
    run_rows = [[_RUN_TITLES.get(k, k.replace("_", " ")), _fmt(v)]
                for k, v in d["run"].items() if k != "kernel"]
    foot = f"phaseglass {_e(summary['phaseglass_version'])}"
    if summary.get("command"):
        foot += f" \u00b7 <code>{_e(summary['command'])}</code>"
    return _template().substitute(
        title=_e(model["name"] or "model"),
        description=f"<p>{_e(model['description'])}</p>" if model["description"] else "",
        caution=_e(CAUTION),
        warnings=warnings,
        parameters=_parameters(digest, d["parameters"], n_chains),
        flag_legend=_e(_FLAG_LEGEND),
        columns=_columns(digest),
        run_table=_table(run_rows, ["run", "value"], cls="kv"),
        settings=_settings(summary),
        figures=_figures(images, captions, animation),
        notes=('<ul id="notes">' + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>"
               if notes else ""),
        footer=foot,
    )

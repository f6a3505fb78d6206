"""Planning a 2D experiment: are the sites resolved in F1 of 3QMAS and 5QMAS, field by field?

For each field and coherence order the model's sites are simulated as a
sheared MQMAS spectrum (infinite-rate MAS, ideal excitation, through
:func:`powderspin.simulator.simulate`).  Each pair of sites gets two numbers:
the shared area of their F1 projections over the smaller one (the planner's
resolution overlap, :func:`powderspin.planning.measures.resolution_overlap`)
and the same for their F2 projections, i.e. the 1D MAS central transitions.
A site pair is resolved in F1 when its F1 overlap is below the threshold.

In the isotropic F1 scale a site's F1 centre does not depend on the order
(k_F1 = -10/17 for every spin and order, :mod:`powderspin.physics.multiple_quantum`),
so with the same F1 line width 3QMAS and 5QMAS resolve the same pairs; what
favours a higher order in practice (F1 widths that scale differently) is not
modelled here.

Line widths: the measurement's F1 broadening; where it has none, the site's
F2 broadening stands in for it, and where there is none at all the planner's
100 Hz (with a note): the F1 width of a real spectrum comes from what
broadens its sites (a shift distribution, relaxation), not from the shear.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from types import MappingProxyType
from typing import Mapping

from ..frozen import reduce_through_init
from ..model.values import Model
from ..physics.multiple_quantum import allowed_mq_orders
from ..simulator import as_model, simulate
from .measures import resolution_overlap
from .planner import DEFAULT_LINEWIDTH_HZ, DEFAULT_THRESHOLD, _check_fields
from .rotors import PlanError

__all__ = ["F1Resolution", "plan_f1_resolution", "f1_resolution_text"]


@dataclass(frozen=True)
class F1Resolution:
    """Whether the sites are resolved in F1 of one MQMAS experiment at one field.

    Attributes
    ----------
    field_tesla : float
    mq_order : int
    f1_centres_ppm, f2_centres_ppm : Mapping of str to float
        Each site's centres of gravity (second-order theory; metadata of the simulation).
    f1_overlaps, f2_overlaps : Mapping of str to float
        Per site pair ``"A | B"``: shared area of the two projections over the smaller one (0 to 1).
    threshold : float
    notes : tuple of str
    """

    field_tesla: float
    mq_order: int
    f1_centres_ppm: Mapping
    f2_centres_ppm: Mapping
    f1_overlaps: Mapping
    f2_overlaps: Mapping
    threshold: float
    notes: tuple = field(default=())

    __reduce__ = reduce_through_init  # picklable: to and from Dask workers (powderspin.frozen)

    def __post_init__(self):
        for k in ("f1_centres_ppm", "f2_centres_ppm", "f1_overlaps", "f2_overlaps"):
            object.__setattr__(self, k, MappingProxyType(dict(getattr(self, k))))

    @property
    def largest_f1_overlap(self) -> float:
        """The largest F1 overlap of any pair (0 with one site).

        Returns
        -------
        float
        """
        return max(self.f1_overlaps.values(), default=0.0)

    @property
    def resolved(self) -> bool:
        """Every pair's F1 overlap is below the threshold.

        Returns
        -------
        bool
        """
        return self.largest_f1_overlap < self.threshold


def plan_f1_resolution(model, fields=None, *, orders=(3, 5), threshold: float = DEFAULT_THRESHOLD,
                       measurement: int = 0, f1_points: int = 512) -> tuple:
    """F1 resolution of MQMAS experiments for the model's sites, per field and coherence order.

    Parameters
    ----------
    model : Model or path
    fields : sequence of float, optional
        Fields (T); default the planner's (9.4, 14.1, 18.8 T and the model's own).
    orders : sequence of int, optional
        Coherence orders; those the spin does not have are skipped with a note.
    threshold : float, optional
        Largest F1 overlap for "resolved" (the planner's default).
    measurement : int, optional
        The measurement whose broadening and orientation choice are used.
    f1_points : int, optional
        F1 points of the planning spectra.

    Returns
    -------
    tuple of F1Resolution
        One per field and order, fields ascending.

    Raises
    ------
    PlanError
        A field outside the schema's range, a threshold outside (0, 1), or a nucleus without
        multiple-quantum transitions.

    References
    ----------
    L. Frydman, J. S. Harwood, J. Am. Chem. Soc. 117 (1995) 5367; S. E. Ashbrook, S. Wimperis,
    Prog. Nucl. Magn. Reson. Spectrosc. 45 (2004) 53.

    Examples
    --------
    >>> import powderspin as ps
    >>> m = ps.make_model("23Na", {"field_tesla": 9.4, "orientations": 12, "gauss_hz": 100.0},
    ...                   [{"label": "a", "shift_ppm": 5.0, "cq_mhz": 2.5}, {"label": "b", "shift_ppm": 0.0,
    ...                                                                   "cq_mhz": 1.0}])
    >>> r = plan_f1_resolution(m, [9.4], orders=(3,))[0]
    >>> r.resolved, r.f1_overlaps["a | b"] < r.f2_overlaps["a | b"]
    (True, True)
    """
    model: Model = as_model(model, "plan")
    fields = _check_fields(fields, model)
    if not 0 < threshold < 1:
        raise PlanError(f"threshold = {threshold!r} must lie in (0, 1) (a fraction of the smaller site's area)")
    allowed = allowed_mq_orders(model.nucleus.spin)
    if not allowed:
        raise PlanError(f"{model.nucleus.name} has no multiple-quantum transitions to correlate with a central "
                        "transition (a half-integer spin of at least 3/2 is needed)")
    base = model.measurements[measurement]
    notes = []
    f1_l, f1_g = base.f1_lorentz_hz, base.f1_gauss_hz
    if f1_l == 0 and f1_g == 0:
        f1_l = base.lorentz_hz + max(s.lorentz_hz for s in model.sites)
        f1_g = max((base.gauss_hz ** 2 + s.gauss_hz ** 2) ** 0.5 for s in model.sites)
        if f1_l == 0 and f1_g == 0:
            f1_l = DEFAULT_LINEWIDTH_HZ
            notes.append(f"no broadening in the model: {DEFAULT_LINEWIDTH_HZ:g} Hz (Lorentzian) used in F1")
        else:
            notes.append("no F1 broadening in the model: the sites' F2 broadening is used in F1")
    labels = [s.label for s in model.sites]
    out = []
    for b in fields:
        for p in orders:
            if p not in allowed:
                out_notes = (f"mq_order = {p} is not available for I = {model.nucleus.spin_label}",)
                out.append(F1Resolution(b, int(p), {}, {}, {}, {}, threshold, tuple(notes) + out_notes))
                continue
            meas = replace(base, field_tesla=b, spinning_hz=float("inf"), experiment="mqmas", mq_order=int(p),
                           center_ppm=None, width_ppm=None, f1_center_ppm=None, f1_width_ppm=None,
                           f1_points=int(f1_points), f1_lorentz_hz=f1_l, f1_gauss_hz=f1_g, transitions="central",
                           scale=1.0, baseline=())
            m = replace(model, measurements=(meas,), free=(), tied=())
            s = simulate(m)
            cog = s.metadata["centres_of_gravity_ppm"]
            f1o, f2o = {}, {}
            for i in range(len(labels)):
                for j in range(i + 1, len(labels)):
                    key = f"{labels[i]} | {labels[j]}"
                    f1o[key] = resolution_overlap(s.f1_projection(i), s.f1_projection(j))
                    f2o[key] = resolution_overlap(s.f2_projection(i), s.f2_projection(j))
            out.append(F1Resolution(b, int(p), {k: v["f1"] for k, v in cog.items()},
                                    {k: v["f2"] for k, v in cog.items()}, f1o, f2o, threshold, tuple(notes)))
    return tuple(out)


def f1_resolution_text(results) -> str:
    """A plain-text table of :func:`plan_f1_resolution` results: per field and order, each pair's overlaps.

    Parameters
    ----------
    results : sequence of F1Resolution

    Returns
    -------
    str

    Examples
    --------
    >>> r = F1Resolution(9.4, 3, {"a": 10.0, "b": 2.0}, {"a": 5.0, "b": 0.0}, {"a | b": 0.001}, {"a | b": 0.6}, 0.01)
    >>> print(f1_resolution_text([r]), end="")
    MQMAS F1 resolution (overlap = shared area / smaller site; resolved below 0.01)
     field/T  order  pair              F1 overlap  F2 (1D) overlap  resolved
         9.4      3  a | b                  0.001            0.600  yes
    """
    rows = list(results)
    thr = rows[0].threshold if rows else 0.0
    lines = [f"MQMAS F1 resolution (overlap = shared area / smaller site; resolved below {thr:g})",
             f"{'field/T':>8}  {'order':>5}  {'pair':<16}  {'F1 overlap':>10}  {'F2 (1D) overlap':>15}  resolved"]
    notes: list = []
    for r in rows:
        if not r.f1_overlaps:
            lines.append(f"{r.field_tesla:>8g}  {r.mq_order:>5d}  {'-':<16}  {'-':>10}  {'-':>15}  "
                         + ("n/a" if r.notes else "yes (one site)"))
        for pair, o1 in r.f1_overlaps.items():
            lines.append(f"{r.field_tesla:>8g}  {r.mq_order:>5d}  {pair:<16}  {o1:>10.3f}  "
                         f"{r.f2_overlaps[pair]:>15.3f}  {'yes' if o1 < r.threshold else 'no'}")
        notes.extend(n for n in r.notes if n not in notes)
    lines.extend(f"note: {n}" for n in notes)
    return "\n".join(lines) + "\n"

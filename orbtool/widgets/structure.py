"""3-D view of the defect cell with nglview: shells, the empty site and the
in-gap state as isosurfaces.

Frames: nglview draws structures from PDB text, whose cell convention puts
a₁ along x and a₂ in the xy plane; a cube file keeps its own axes. Both
are therefore written in that *standard form* (``ase.cell.Cell.standard_form``),
rotating positions, grid vectors, origin and the vacancy position by the
same rotation, so the isosurface sits on the atoms for any cell.
"""

from __future__ import annotations

import os
import tempfile

import ipywidgets as w
import numpy as np

from .. import style
from ._common import esc, message_html

__all__ = ["StructureView", "EnclosedFraction", "standard_frame", "centre_on_site"]


def _rgb(hexcode: str) -> list[float]:
    return [int(hexcode[i:i + 2], 16) / 255 for i in (1, 3, 5)]


def standard_frame(atoms):
    """(rotated copy of ``atoms`` in standard cell form, rotation Q) with
    new = old @ Q.T for any Cartesian vector."""
    rcell, Q = atoms.cell.standard_form()
    out = atoms.copy()
    out.set_cell(rcell, scale_atoms=False)
    out.positions = atoms.positions @ Q.T
    return out, Q


def centre_on_site(atoms, grid=None, site=None):
    """Translate the cell content so the vacancy sits at the cell centre.

    The grid is rolled by whole voxels and the atoms moved by exactly the
    same vector (then wrapped), so the state stays on its atoms; with no
    grid the move is not quantised. Returns (atoms, grid, site position), Å.
    """
    if site is None:
        return atoms, grid, None
    cell = np.asarray(grid.cell if grid is not None else atoms.cell[:], dtype=float)
    pos = np.asarray(site.position, dtype=float)
    frac = np.linalg.solve(cell.T, pos - (grid.origin if grid is not None else 0.0))
    move = 0.5 - frac
    if grid is not None:
        steps = np.round(move * np.asarray(grid.shape)).astype(int)
        move = steps / np.asarray(grid.shape)
        grid = grid.with_values(np.roll(grid.values, tuple(steps), axis=(0, 1, 2)))
    t = move @ cell
    out = atoms.copy()
    out.positions = out.positions + t
    out.wrap()
    return out, grid, pos + t


class EnclosedFraction:
    """Fraction of a state enclosed by an isosurface, O(log n) per query.

    For a signed orbital (unit ``Å^-3/2``) the isosurface pair ±ψ₀ encloses
    Σ_{|ψ|≥ψ₀} ψ² / Σ ψ²; for a density ρ the surface ρ₀ encloses
    Σ_{ρ≥ρ₀} ρ / Σ ρ (negative density values are ignored). Both are
    voxel sums, i.e. the grid's rectangle-rule integrals.
    """

    def __init__(self, grid):
        v = np.asarray(grid.values, dtype=float).ravel()
        self.signed = grid.unit == "Å^-3/2"
        key = np.abs(v) if self.signed else np.clip(v, 0.0, None)
        weight = v * v if self.signed else key
        order = np.argsort(key)[::-1]
        self._key = key[order]
        total = weight.sum()
        self._cum = np.cumsum(weight[order]) / (total if total > 0 else 1.0)

    @property
    def max_value(self) -> float:
        return float(self._key[0])

    def __call__(self, iso: float) -> float:
        """Fraction (0–1) enclosed at isovalue ``iso`` (grid units)."""
        n = int(np.searchsorted(-self._key, -float(iso), side="right"))
        return 0.0 if n == 0 else float(self._cum[n - 1])

    def isovalue_for(self, fraction: float) -> float:
        """Isovalue enclosing (at least) ``fraction`` of the state."""
        i = int(np.searchsorted(self._cum, fraction))
        return float(self._key[min(i, self._key.size - 1)])


class StructureView:
    """nglview panel: cell around the vacancy, shells, ghost site, isosurfaces.

    Parameters
    ----------
    atoms : ase.Atoms
        The defect cell.
    site : VacancySite-like, optional
        ``position`` (Å), ``first_shell``/``second_shell`` (neighbours with ``index``).
    grid : Grid, optional
        The in-gap state (density or signed orbital) on the defect cell.
    radius : float
        Initial R (Å) of the "only atoms within R" toggle.
    """

    def __init__(self, atoms, site=None, grid=None, *, radius: float = 6.0):
        self.atoms, self.site, self.grid = atoms, site, grid
        shown, grid_shown, self.site_position = centre_on_site(atoms, grid, site)
        self.std_atoms, self.Q = standard_frame(shown)
        self.only_near = w.Checkbox(value=False, description="only atoms within R of the site", indent=False)
        # R redraws the atoms (a round trip to the browser per step): update on release, not while dragging
        self.radius = w.FloatSlider(value=radius, min=2.0, max=15.0, step=0.5, description="R (Å)",
                                    continuous_update=False, style={"description_width": "120px"},
                                    layout=w.Layout(width="420px"))
        self.colour_by = w.ToggleButtons(options=["element", "shell"], value="element", description="colour by",
                                         style={"description_width": "120px", "button_width": "90px"})
        self.only_near.disabled = self.radius.disabled = site is None
        self.status = w.HTML()
        self.legend = w.HTML()
        controls = [self.colour_by, self.only_near, self.radius]
        self.isovalue = None
        self._cube = None
        self._pending: set = set()  # changes waiting until the browser has drawn the view
        self._n_surfaces = 0
        if grid is not None:
            self.fraction = EnclosedFraction(grid)
            self._tmp = tempfile.mkdtemp(prefix="orbtool-view-")
            self._cube = self._write_cube(grid_shown)
            # exponents on the slider's own grid, so the browser does not snap the value and echo it back
            top = np.floor(np.log10(self.fraction.max_value) * 50) / 50
            expo = top - 3 + np.round((np.log10(self.fraction.isovalue_for(0.6)) - top + 3) * 50) / 50
            iso = float(10 ** min(expo, top))
            self.isovalue = w.FloatLogSlider(value=iso, base=10, min=top - 3, max=top, step=0.02,
                                             description=f"isovalue ({grid.unit})", readout_format=".2e",
                                             continuous_update=False,
                                             style={"description_width": "120px"}, layout=w.Layout(width="440px"))
            self.isovalue.add_class("orbtool-isovalue")
            self.enclosed = w.HTML()
            self.isovalue.observe(self._on_iso, names="value")
            controls += [self.isovalue, self.enclosed]
        for c in (self.only_near, self.radius, self.colour_by):
            c.observe(self._draw_atoms, names="value")
        controls += [self.status, self.legend]
        self.view = self._build_view()
        self.view.observe(self._flush, names="_ngl_repr_dict")
        self.widget = w.HBox([self.view, w.VBox(controls, layout=w.Layout(width="460px", min_width="460px"))],
                             layout=w.Layout(flex_flow="row wrap"))
        self.widget.add_class("orbtool-structure")

    # --------------------------------------------------------------- state
    def _build_view(self):
        """The nglview widget, drawn from the current control values.

        Later control changes reach the browser through :meth:`_send` only
        once the browser has reported the components drawn (see
        :meth:`_browser_has`); until then they wait in ``_pending``."""
        import nglview as nv

        view = nv.NGLWidget()
        view._set_size("520px", "440px")
        self.view = view
        view.add_component(nv.ASEStructure(self.std_atoms), default_representation=False)
        self._draw_atoms()
        if self._cube is not None:
            view.add_component(self._cube, default_representation=False)
            self._add_surfaces(float(self.isovalue.value))
            self._show_fraction(float(self.isovalue.value))
        # the cell as 12 thin grey edges in one shape (NGL's unit-cell representation keeps its orange default)
        cell = np.asarray(self.std_atoms.cell[:])
        edges = []
        for c in np.ndindex(2, 2, 2):
            for k in range(3):
                if c[k] == 0:
                    a = np.asarray(c, float) @ cell
                    edges.append(("cylinder", a.tolist(), (a + cell[k]).tolist(), _rgb(style.MUTED), 0.03))
        view._add_shape(edges, name="cell")
        if self.site is not None:
            # shapes are nglview components too: add the ghost after the cube so the cube stays component 1;
            # an opaque marker with a label, visible through the (translucent) isosurface
            pos = self.site_position @ self.Q.T
            view.shape.add_sphere(pos.tolist(), _rgb(style.VACANCY_GHOST), 0.45, "vacant site")
            view.shape.add_text((pos + np.array([0.0, 0.0, 0.9])).tolist(), _rgb(style.INK), 2.5, "vacancy")
        view.center()
        return view

    # ------------------------------------------------------- browser sync
    def _browser_has(self, component: int, representations: int = 0) -> bool:
        """True when the browser's view has drawn ``component`` with at least
        ``representations`` representations.

        nglview's front end reports what it has drawn (``_ngl_repr_dict``,
        sent after every added or removed representation). A message
        addressed to a component or representation it has not drawn yet
        fails there ("Cannot read properties of undefined (reading
        'reprList')"): a view that has just been created (a restored session,
        a new case) has ``loaded`` set before its first components arrive.
        """
        v = self.view
        drawn = getattr(v, "_ngl_repr_dict", None) or {}
        if not getattr(v, "loaded", False) or str(component) not in drawn:
            return False
        return len(drawn[str(component)] or {}) >= representations

    def _send(self, method, target, args=None, **kwargs):
        """One nglview call to the browser (only once :meth:`_browser_has` says
        its target is drawn).

        Not added to the widget's message archive: the archive holds the view
        as built, and nglview (4.0, pinned) re-sends the whole archive, cube
        data included, each time it grows (~0.2 MB per call for the demo);
        a view the browser draws again takes its representations from
        ``_ngl_repr_dict``, which the browser keeps current. Sent at once
        rather than through nglview's call thread, which polls its queue
        every 0.1 s (unless that queue still holds calls: order is kept).
        """
        v = self.view
        queue = getattr(getattr(v, "_remote_call_thread", None), "q", None)
        if queue is None or queue or not hasattr(v, "_get_remote_call_msg"):
            v._remote_call(method, target=target, args=args or [], kwargs=kwargs, fire_once=True)
            return
        v.send(v._get_remote_call_msg(method, target=target, args=args or [], kwargs=kwargs))

    def resize(self):
        """Have the browser's view measure its canvas again (a view drawn in a
        hidden tab has no size until then); nothing to do before it is loaded."""
        if getattr(self.view, "loaded", False):
            self._send("handleResize", "Widget")

    def _flush(self, change=None):
        """Send the changes that waited for the browser (called when it reports what it has drawn)."""
        if "atoms" in self._pending and self._browser_has(0):
            self._pending.discard("atoms")
            self._draw_atoms({"new": None})
        if "iso" in self._pending and self._browser_has(1, self._n_surfaces):
            self._pending.discard("iso")
            self._send_isovalue(float(self.isovalue.value))

    def set(self, *, isovalue=None, only_near=None, radius=None, colour_by=None):
        """Set the controls by code (before or after display); the 3-D view follows."""
        if radius is not None:
            self.radius.value = min(max(float(radius), self.radius.min), self.radius.max)
        if only_near is not None and not self.only_near.disabled:
            self.only_near.value = bool(only_near)
        if colour_by is not None:
            self.colour_by.value = colour_by
        if isovalue is not None and self.isovalue is not None:
            s = self.isovalue
            self.isovalue.value = min(max(float(isovalue), s.base ** s.min), s.base ** s.max)

    # --------------------------------------------------------------- atoms
    def _shell(self, k):
        shells = getattr(self.site, "shells", None) or ()
        return [int(n.index) for n in shells[k - 1]] if len(shells) >= k else []

    def _near(self):
        from ase.geometry import get_distances

        _, d = get_distances(self.atoms.positions, np.asarray(self.site.position)[None], cell=self.atoms.cell,
                             pbc=self.atoms.pbc)
        return [int(i) for i in np.flatnonzero(d[:, 0] <= self.radius.value)]

    def _draw_atoms(self, change=None):
        """Atoms as ball+stick by shell and colour; ``change`` None: the first
        drawing (part of the built view), else a redraw sent to the browser
        (or kept pending until the browser has drawn the view)."""
        live = change is not None
        send = live and self._browser_has(0)
        if live:  # not drawn in the browser yet: redrawn from the state once it is (see _flush)
            (self._pending.discard if send else self._pending.add)("atoms")
        keep = self._near() if (self.only_near.value and self.site is not None) else list(range(len(self.atoms)))
        s1, s2 = set(self._shell(1)), set(self._shell(2))
        symbols = self.atoms.get_chemical_symbols()

        def sel(ix):
            return "@" + ",".join(map(str, ix)) if ix else "none"

        radius = {1: 0.3, 2: 0.22, "rest": 0.13}
        by_shell = self.colour_by.value == "shell"
        groups: dict = {}
        for i in keep:
            shell = 1 if i in s1 else 2 if i in s2 else "rest"
            colour = style.shell_colour(shell) if by_shell else style.element_colour(symbols[i])
            groups.setdefault((shell, colour), []).append(i)
        # the text first: it reaches the browser before the 3-D redraw
        self.status.value = message_html(f"{len(keep)} of {len(self.atoms)} atoms shown", "info")
        self._show_legend(sorted({symbols[i] for i in keep}))
        if send:
            self._send("removeAllRepresentations", "compList", component_index=0)
        for (shell, colour), ix in groups.items():
            if send:
                self._send("addRepresentation", "compList", ["ball+stick"], sele=sel(sorted(ix)), color=colour,
                           radius=radius[shell], component_index=0)
            elif not live:
                self.view.add_representation("ball+stick", selection=sel(sorted(ix)), color=colour,
                                             radius=radius[shell], component=0)

    def _show_legend(self, elements):
        sw = '<span style="color:{c};font-size:15px">●</span> {t}'
        if self.colour_by.value == "shell":
            items = [sw.format(c=style.shell_colour(1), t="shell 1"), sw.format(c=style.shell_colour(2), t="shell 2"),
                     sw.format(c=style.shell_colour("rest"), t="other atoms")]
        else:
            items = [sw.format(c=style.element_colour(e), t=esc(e)) for e in elements]
            if self.site is not None:
                items.append("larger balls: shell 1, shell 2")
        if self.site is not None:
            items.append(sw.format(c=style.VACANCY_GHOST, t="vacant site"))
        if self.grid is not None:
            if self.grid.unit == "Å^-3/2":
                items += [f'<span style="color:{style.LOBE_POSITIVE}">■</span> ψ &gt; 0',
                          f'<span style="color:{style.LOBE_NEGATIVE}">■</span> ψ &lt; 0']
            else:
                items.append(f'<span style="color:{style.LOBE_POSITIVE}">■</span> density '
                             f'({esc(self.grid.unit)}) above the isovalue')
        items.append(f'<span style="color:{style.MUTED}">□</span> cell')
        self.legend.value = '<div class="orbtool-legend" style="font-size:12px;line-height:1.6">' + \
            " &nbsp; ".join(items) + "</div>"

    # ---------------------------------------------------------- isosurface
    def _write_cube(self, grid) -> str:
        from ase import Atoms
        from ase.io.cube import write_cube

        cell = np.asarray(grid.cell) @ self.Q.T
        origin = np.asarray(grid.origin) @ self.Q.T
        holder = Atoms(self.std_atoms.get_chemical_symbols(), positions=self.std_atoms.positions, cell=cell,
                       pbc=True)
        path = os.path.join(self._tmp, "state.cube")
        with open(path, "w") as fh:
            write_cube(fh, holder, data=np.asarray(grid.values, dtype=float), origin=origin)
        return path

    def _add_surfaces(self, iso):
        v = self.view
        v.add_representation("surface", component=1, isolevelType="value", isolevel=float(iso),
                             color=style.LOBE_POSITIVE, opacity=0.45)
        self._n_surfaces = 1
        if self.fraction.signed:
            v.add_representation("surface", component=1, isolevelType="value", isolevel=float(iso),
                                 negateIsolevel=True, color=style.LOBE_NEGATIVE, opacity=0.45)
            self._n_surfaces = 2

    def _send_isovalue(self, iso):
        for k in range(self._n_surfaces):
            self._send("setParameters", "Representation", component_index=1, repr_index=k, isolevel=float(iso))

    def _on_iso(self, change):
        iso = float(change["new"])
        old = float(change["old"])
        self._show_fraction(iso)
        if old > 0 and abs(np.log10(iso / old)) < 0.005:  # a rounding echo from the browser, not a move
            return
        if self._browser_has(1, self._n_surfaces):
            self._pending.discard("iso")
            self._send_isovalue(iso)
        else:  # sent once the browser reports the surfaces drawn (see _flush)
            self._pending.add("iso")

    def _show_fraction(self, iso):
        self.enclosed.value = (f'<div class="orbtool-enclosed" style="white-space:normal">isovalue '
                               f'{iso:.3g} {esc(self.grid.unit)} encloses <b>{100 * self.fraction(iso):.1f} %</b> '
                               'of the state</div>')

    def _ipython_display_(self):  # pragma: no cover - notebook only
        from IPython.display import display

        display(self.widget)

"""MassModel: a validated model spec, its components and their total potential.

This is the notebook-facing entry point::

    import icgen
    m = icgen.load_model()                      # built-in default spiral
    m = icgen.load_model("configs/dwarf.toml")
    m.circular_speed([2.0, 8.0])                # km/s
"""
import numpy as np

from .kinds import KINDS, kind_of
from .potential import CombinedPotential
from .spec import load_dict, load_spec, spec_from_dict

#: Points of the model's rotation curve (the one stored in every snapshot).
CURVE_POINTS = 120
#: Outer radius (kpc) of the curve of a model with no length scale (point masses only):
#: the size of a galaxy's disk.
POINT_MASS_RADIUS = 10.0


class MassModel:
    """A galaxy model in internal units (kpc, km/s, Msun).

    Attributes
    ----------
    spec : icgen.spec.ModelSpec
    components : dict name -> profile object, in model-file order
    potential : CombinedPotential
    gas_solution : the iteration record of the gas layers (None without gas)
    """

    def __init__(self, spec):
        self.spec = spec
        built = {}
        # each kind builds its components (icgen.kinds); self-consistent layers last, in
        # the potential of the others (in model-file order)
        for later in (False, True):
            others = [built[s.name] for s in spec.components if s.name in built]
            for kind in KINDS.values():
                specs = [s for s in spec.components if kind_of(s) is kind]
                if specs and kind.self_consistent == later:
                    built.update(zip((s.name for s in specs),
                                     kind.build(specs, spec, others)))
        self.components = {s.name: built[s.name] for s in spec.components}
        self.potential = CombinedPotential(list(self.components.values()))
        solved = [c for c in self.components.values() if hasattr(c, "solution")]
        self.gas_solution = solved[0].solution if solved else None
        self._kinematics = {}

    def kind(self, name):
        """The Kind (icgen.kinds) of component ``name``."""
        return kind_of(self.components[name])

    def kinematics(self, name):
        """The velocity moments of component ``name`` predicted by the method that samples
        it, computed independently of the sampler (icgen.kinds.base.Kinematics); made once.
        The one door through which check, stability and mock get a component's moments."""
        if name not in self._kinematics:
            self._kinematics[name] = self.kind(name).kinematics(self, name)
        return self._kinematics[name]

    @property
    def name(self):
        return self.spec.name

    @property
    def disks(self):
        """Stellar disks (profile objects), in model-file order."""
        return [c for c in self.components.values() if kind_of(c).stellar_disk]

    @property
    def gas_disks(self):
        """Gas disks (profile objects), in model-file order."""
        return [c for c in self.components.values() if kind_of(c).pressure]

    def density(self, R, z, component=None):
        """rho (Msun/kpc^3) at cylindrical (R, z) in kpc."""
        return self.potential.density(R, z, component)

    def potential_at(self, R, z, component=None):
        """Phi ((km/s)^2) at (R, z) kpc."""
        return self.potential.potential(R, z, component)

    def forces(self, R, z, component=None):
        """(F_R, F_z) ((km/s)^2/kpc)."""
        return self.potential.forces(R, z, component)

    def circular_speed(self, R, component=None):
        """Midplane circular speed (km/s) at R (kpc), total or one component."""
        return self.potential.circular_speed(R, component)

    def reference_scale_length(self):
        """Scale length (kpc) of the most massive disk, or None without disks."""
        disks = self.disks
        if not disks:
            return None
        return max(disks, key=lambda d: d.total_mass).R_d

    def curve_radii(self, n=CURVE_POINTS):
        """``n`` radii (kpc), evenly spaced from r_out / n to r_out: r_out is 10 R_d of the
        main disk, else 5 x the largest spheroid scale radius, else POINT_MASS_RADIUS."""
        r_d = self.reference_scale_length()
        scales = [c.scale for c in self.components.values() if c.scale > 0]
        r_out = 10 * r_d if r_d else 5 * max(scales) if scales else POINT_MASS_RADIUS
        return np.linspace(r_out / n, r_out, n)

    def rotation_curve(self, radii=None):
        """Analytic midplane rotation curve, v_c^2 = R dPhi/dR at z = 0.

        Returns (radii (M,) kpc, speeds): ``speeds`` maps "total" and each component
        name to (M,) km/s. ``radii`` default: :meth:`curve_radii`.
        """
        R = self.curve_radii() if radii is None else np.asarray(radii, float)
        speeds = {"total": self.circular_speed(R)}
        for name in self.components:
            speeds[name] = self.circular_speed(R, name)
        return R, speeds

    def enclosed_mass(self, r, component=None):
        """Mass (Msun) inside spheres of radius r (kpc), total or one component."""
        r = np.atleast_1d(np.asarray(r, float))
        names = list(self.components) if component is None else [component]
        return sum(self.components[n].enclosed_mass(r) for n in names)

    def __repr__(self):
        parts = ", ".join(f"{n}:{c.kind}" for n, c in self.components.items())
        return f"MassModel({self.name!r}; {parts})"


def load_model(source=None, **overrides):
    """Load a MassModel from a TOML path (None: built-in default) or a dict.

    ``overrides`` replace top-level tables of the model file, e.g.
    ``load_model(components={...})``.
    """
    if isinstance(source, dict) or overrides:
        base = source if isinstance(source, dict) else load_dict(source)
        data = {**base, **overrides}
        return MassModel(spec_from_dict(data))
    return MassModel(load_spec(source))

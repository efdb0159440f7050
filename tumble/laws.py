"""The registry of scattering laws of a triaxial ellipsoid (numpy-free at import).

Every law is a :class:`ScatteringLaw` record, a combination of the Lommel-Seeliger and
Lambert local laws whose integrals live in :mod:`tumble.brightness`; the simulator, the
physical model (:class:`tumble.model.PhysicalModel`) and the CLI choices read
:data:`SCATTERING_LAWS`. Kept apart from :mod:`tumble.brightness` so that building the
command line does not import the science stack.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from tumble.exceptions import GeometryError

__all__ = ["DEFAULT_LAMBERT_WEIGHT", "LAMBERT_ORDER", "REFERENCE_ORDER", "ScatteringLaw", "SCATTERING_LAWS",
           "LAWS", "scattering_law"]

#: Lambert weight c of the 'ls-lambert' law when none is given (Kaasalainen et al. 2001 use 0.1).
DEFAULT_LAMBERT_WEIGHT = 0.1
#: Quadrature order of the Lambert term in the fast brightness (about 1e-6 of that term for a/c = 2.5).
LAMBERT_ORDER = 24
#: Quadrature order of the slow surface reference (about 1e-12, see tumble.brightness.ellipsoid_quadrature).
REFERENCE_ORDER = 64


@dataclass(frozen=True)
class ScatteringLaw:
    """A disk-integrated scattering law of a triaxial ellipsoid: ``S = w_LS mu mu0/(mu + mu0) + w_L mu mu0``.

    Every law of the registry :data:`SCATTERING_LAWS` is such a combination of the
    Lommel-Seeliger and Lambert local laws. Contract of a law (what the simulator, the
    physical model and the CLI use):

    - :meth:`brightness` is the fast integral over the lit and visible surface (the
      Lommel-Seeliger closed form of Muinonen & Lumme 2015, plus the Lambert term by
      the quadrature of :func:`tumble.brightness.lambert_ellipsoid` when ``lambert_weight > 0``);
    - :meth:`reference_brightness` is the slow surface quadrature of the same local law
      (:func:`tumble.brightness.ellipsoid_quadrature`, normals from the parametrisation itself), which the
      tests compare with :meth:`brightness` for every registered law;
    - :meth:`sphere_zero_phase` is the brightness of the equal-volume sphere at zero
      phase (the magnitude zero point).

    Attributes
    ----------
    name : str
        Registry key (also the CLI choice).
    ls_weight, lambert_weight : float
        Weights of the two local laws.
    description : str
        One line with the citation.
    """

    name: str
    ls_weight: float
    lambert_weight: float
    description: str

    def brightness(self, sun_dir, obs_dir, axes, *, order: int = LAMBERT_ORDER):
        """Brightness integral, units of the axes squared, shape of the broadcast leading axes."""
        from tumble.brightness import lambert_ellipsoid, lommel_seeliger_ellipsoid

        out = 0.0
        if self.ls_weight:
            out = self.ls_weight * lommel_seeliger_ellipsoid(sun_dir, obs_dir, axes)
        if self.lambert_weight:
            out = out + self.lambert_weight * lambert_ellipsoid(sun_dir, obs_dir, axes, order=order)
        return out

    def reference_brightness(self, sun_dir, obs_dir, axes, *, order: int = REFERENCE_ORDER):
        """Slow reference: the same integral by surface quadrature (:func:`tumble.brightness.ellipsoid_quadrature`)."""
        from tumble.brightness import ellipsoid_quadrature

        return ellipsoid_quadrature(sun_dir, obs_dir, axes, ls_weight=self.ls_weight,
                                    lambert_weight=self.lambert_weight, order=order)

    def sphere_zero_phase(self, axes):
        """Brightness of the equal-volume sphere at zero phase.

        For a sphere of radius R = (abc)^(1/3): Lommel-Seeliger ``pi R^2/2`` (half the
        projected area, Muinonen & Lumme 2015), Lambert ``2 pi R^2/3`` (integral of
        cos^2 over the visible hemisphere).
        """
        import numpy as np

        from tumble.brightness import _axes

        ax = _axes(axes)
        r2 = np.cbrt(ax[..., 0] * ax[..., 1] * ax[..., 2]) ** 2
        return np.pi * r2 * (0.5 * self.ls_weight + 2.0 * self.lambert_weight / 3.0)


def _lommel_seeliger(lambert_weight=None) -> ScatteringLaw:
    return ScatteringLaw("lommel-seeliger", 1.0, 0.0,
                         "Lommel-Seeliger, closed form for the ellipsoid (Muinonen & Lumme 2015, A&A 584, A23)")


def _ls_lambert(lambert_weight=None) -> ScatteringLaw:
    c = DEFAULT_LAMBERT_WEIGHT if lambert_weight is None else float(lambert_weight)
    if not (math.isfinite(c) and c >= 0):
        raise GeometryError(f"the Lambert weight must be a finite number >= 0, got {lambert_weight!r}")
    return ScatteringLaw("ls-lambert", 1.0, c,
                         f"Lommel-Seeliger + {c:g} Lambert (Kaasalainen, Torppa & Muinonen 2001, Icarus 153, 37)")


def _lambert(lambert_weight=None) -> ScatteringLaw:
    return ScatteringLaw("lambert", 0.0, 1.0, "Lambert (mu mu0), the limit of a bright, multiply scattering "
                         "surface; quadrature on the ellipsoid")


#: Registry of scattering laws: name -> factory taking the Lambert weight (used by 'ls-lambert' only).
SCATTERING_LAWS = {"lommel-seeliger": _lommel_seeliger, "ls-lambert": _ls_lambert, "lambert": _lambert}
#: Names of the registered laws (CLI choices, validation messages).
LAWS = tuple(SCATTERING_LAWS)


def scattering_law(law="lommel-seeliger", lambert_weight: float | None = None) -> ScatteringLaw:
    """The registered law ``law`` (a name of :data:`SCATTERING_LAWS`, or a :class:`ScatteringLaw`).

    Raises
    ------
    GeometryError
        Unknown name, or a bad Lambert weight.
    """
    if isinstance(law, ScatteringLaw):
        return law
    try:
        factory = SCATTERING_LAWS[str(law)]
    except KeyError:
        raise GeometryError(f"unknown scattering law '{law}' (choose from {', '.join(LAWS)})") from None
    return factory(lambert_weight)

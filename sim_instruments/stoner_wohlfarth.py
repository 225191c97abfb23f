"""Single-domain (Stoner-Wohlfarth) magnetisation of a thin ferromagnetic film.

Axes: x is the current direction, y the other in-plane direction, z the film normal.
Fields are mu0*H in tesla. The energy density divided by the saturation magnetisation
(so it is in tesla) is

    e(m) = -(B_k / 2) (m . u_k)^2 + (B_d / 2) m_z^2 - B . m

with B_k the uniaxial anisotropy field, u_k the in-plane easy axis and B_d = mu0*M_eff
the effective demagnetising field (B_d > 0 keeps m in the plane, B_d < 0 means a
perpendicular easy axis). Hysteresis comes from following the local minimum reached
by descent from the previous state, never the global one.

The minimiser works on 3-vectors held as Python floats: for a single spin, numpy's
per-call overhead would dominate, and a field step must cost well under 200 us.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

Vec3 = tuple[float, float, float]

ROTATION_PLANES: tuple[str, ...] = ("xy", "zx", "zy")

# Largest single rotation of the field a relaxation may see while m can be bistable.
# A step of this size can delay a switching event by at most this angle of the sweep.
MAX_SUBSTEP_DEG = 5.0
# A relaxation step never turns m by more than this, so descent cannot leap a barrier.
TRUST_RADIUS_RAD = 0.5
MAX_ITERATIONS = 400
# Relative to the largest field in the problem; float rounding is ~1e-16 of it.
GRADIENT_TOLERANCE = 1e-11
MAX_HALVINGS = 40


def field_direction(angle_deg: float, rotation_plane: str) -> Vec3:
    """Unit vector of the field at ``angle_deg`` in ``rotation_plane``.

    xy: from +x (current) towards +y; zx: from +z towards +x; zy: from +z towards +y.
    """
    a = math.radians(angle_deg)
    c, s = math.cos(a), math.sin(a)
    if rotation_plane == "xy":
        return (c, s, 0.0)
    if rotation_plane == "zx":
        return (s, 0.0, c)
    if rotation_plane == "zy":
        return (0.0, s, c)
    raise ValueError(
        f"unknown rotation plane {rotation_plane!r}; valid: {', '.join(ROTATION_PLANES)}"
    )


def field_vector(field_T: float, angle_deg: float, rotation_plane: str) -> Vec3:
    """Field vector in tesla; a negative magnitude points opposite (angle + 180 deg)."""
    ux, uy, uz = field_direction(angle_deg, rotation_plane)
    return (field_T * ux, field_T * uy, field_T * uz)


@dataclass(frozen=True)
class FilmAnisotropy:
    """Uniaxial in-plane anisotropy plus thin-film shape anisotropy, fields in tesla."""

    anisotropy_field_T: float
    demag_field_T: float
    easy_axis_deg: float = 0.0
    _ex: float = field(init=False, repr=False, compare=False)
    _ey: float = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        if not self.anisotropy_field_T >= 0.0 or not math.isfinite(self.anisotropy_field_T):
            raise ValueError("anisotropy_field_T must be finite and >= 0")
        if not math.isfinite(self.demag_field_T) or not math.isfinite(self.easy_axis_deg):
            raise ValueError("demag_field_T and easy_axis_deg must be finite")
        a = math.radians(self.easy_axis_deg)
        # Cached because relax() reads them on every iteration.
        object.__setattr__(self, "_ex", math.cos(a))
        object.__setattr__(self, "_ey", math.sin(a))

    @property
    def easy_axis(self) -> Vec3:
        return (self._ex, self._ey, 0.0)

    def energy(self, m: Vec3, b: Vec3) -> float:
        """Energy density over M_s, in tesla, of unit vector ``m`` in field ``b``."""
        me = m[0] * self._ex + m[1] * self._ey
        return (
            -0.5 * self.anisotropy_field_T * me * me
            + 0.5 * self.demag_field_T * m[2] * m[2]
            - (b[0] * m[0] + b[1] * m[1] + b[2] * m[2])
        )

    def uniqueness_field_T(self, in_plane: bool) -> float:
        """Field magnitude above which the energy has a single minimum on the sphere.

        The anisotropy is a quadratic form with eigenvalues (-B_k, 0, B_d). A second,
        non-global minimum needs a Lagrange multiplier between the two lowest
        eigenvalues, which forces |B| <= (largest - smallest eigenvalue). With the field
        and m in the plane and B_d >= 0, m stays in the plane and only B_k matters.
        """
        bk, bd = self.anisotropy_field_T, self.demag_field_T
        if in_plane and bd >= 0.0:
            return bk
        q = (-bk, 0.0, bd)
        return max(q) - min(q)


def _normalise(v: Vec3) -> Vec3:
    n = math.sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2])
    if n == 0.0 or not math.isfinite(n):
        raise ValueError(f"cannot normalise {v!r}")
    return (v[0] / n, v[1] / n, v[2] / n)


def _tangent_basis(mx: float, my: float, mz: float) -> tuple[Vec3, Vec3]:
    # Pick the reference axis far from m so the cross product is well conditioned.
    if abs(mz) < 0.9:
        n = math.hypot(mx, my)
        u = (-my / n, mx / n, 0.0)
    else:
        n = math.hypot(my, mz)
        u = (0.0, -mz / n, my / n)
    v = (my * u[2] - mz * u[1], mz * u[0] - mx * u[2], mx * u[1] - my * u[0])
    return u, v


def _newton_direction(
    gu: float, gv: float, huu: float, hvv: float, huv: float, floor: float
) -> tuple[float, float, float]:
    """Saddle-free Newton step (du, dv) and the smallest Hessian eigenvalue.

    Dividing by |eigenvalue| keeps the step downhill where the curvature is negative
    (m sitting on a saddle just past a switching field); along a negative-curvature
    direction with no gradient the step goes a full trust radius to break the symmetry.
    """
    t = 0.5 * math.atan2(2.0 * huv, huu - hvv)
    c, s = math.cos(t), math.sin(t)
    mean = 0.5 * (huu + hvv)
    rad = math.hypot(0.5 * (huu - hvv), huv)
    l_hi, l_lo = mean + rad, mean - rad
    # Eigenvectors: (c, s) for l_hi and (-s, c) for l_lo.
    g_hi = gu * c + gv * s
    g_lo = -gu * s + gv * c
    d_hi = -g_hi / max(abs(l_hi), floor)
    if l_lo < -floor:
        d_lo = -math.copysign(TRUST_RADIUS_RAD, g_lo) if g_lo != 0.0 else TRUST_RADIUS_RAD
    else:
        d_lo = -g_lo / max(abs(l_lo), floor)
    return d_hi * c - d_lo * s, d_hi * s + d_lo * c, l_lo


def relax(
    m: Vec3, b: Vec3, anisotropy: FilmAnisotropy, max_iterations: int = MAX_ITERATIONS
) -> Vec3:
    """Local energy minimum reached by damped descent from ``m`` in field ``b``.

    Newton steps on the tangent plane of the sphere, each capped at a trust radius and
    halved until the energy does not rise, so m ends in the basin it started in (or,
    past a switching field, the one it falls into).
    """
    bk, bd = anisotropy.anisotropy_field_T, anisotropy.demag_field_T
    ex, ey = anisotropy._ex, anisotropy._ey
    bx, by, bz = b
    mx, my, mz = _normalise(m)
    scale = bk + abs(bd) + math.sqrt(bx * bx + by * by + bz * bz)
    if scale == 0.0:
        return (mx, my, mz)
    gtol = GRADIENT_TOLERANCE * scale
    # Energy comparisons below this are rounding, not physics.
    etol = 1e-15 * scale
    e_old = anisotropy.energy((mx, my, mz), b)
    for _ in range(max_iterations):
        me = mx * ex + my * ey
        gx = -bk * me * ex - bx
        gy = -bk * me * ey - by
        gz = bd * mz - bz
        (ux, uy, uz), (vx, vy, vz) = _tangent_basis(mx, my, mz)
        gu = gx * ux + gy * uy + gz * uz
        gv = gx * vx + gy * vy + gz * vz
        lam = gx * mx + gy * my + gz * mz
        ue = ux * ex + uy * ey
        ve = vx * ex + vy * ey
        # Riemannian Hessian on the sphere: projected Euclidean Hessian minus (m . grad).
        huu = -bk * ue * ue + bd * uz * uz - lam
        hvv = -bk * ve * ve + bd * vz * vz - lam
        huv = -bk * ue * ve + bd * uz * vz
        du, dv, l_lo = _newton_direction(gu, gv, huu, hvv, huv, gtol)
        if math.hypot(gu, gv) <= gtol and l_lo >= -gtol:
            break
        step = math.hypot(du, dv)
        if step == 0.0:
            break
        if step > TRUST_RADIUS_RAD:
            du, dv, step = (
                du * TRUST_RADIUS_RAD / step,
                dv * TRUST_RADIUS_RAD / step,
                TRUST_RADIUS_RAD,
            )
        for _ in range(MAX_HALVINGS):
            cs, sn = math.cos(step), math.sin(step) / step
            cand = _normalise(
                (
                    cs * mx + sn * (du * ux + dv * vx),
                    cs * my + sn * (du * uy + dv * vy),
                    cs * mz + sn * (du * uz + dv * vz),
                )
            )
            e_new = anisotropy.energy(cand, b)
            if e_new <= e_old + etol:
                break
            du, dv, step = 0.5 * du, 0.5 * dv, 0.5 * step
        else:
            break
        mx, my, mz = cand
        e_old = e_new
    return (mx, my, mz)


class Macrospin:
    """Magnetisation of the film, remembering its history for hysteresis.

    Starts along +easy axis in zero field. Each call to :meth:`apply_field` moves the
    field from its previous (magnitude, angle) to the new one along a straight line in
    those two coordinates, the path a magnet ramp and a rotator would take; where m
    could be bistable, the rotation is split into steps of at most MAX_SUBSTEP_DEG.
    """

    def __init__(
        self, anisotropy: FilmAnisotropy, rotation_plane: str = "xy", m0: Vec3 | None = None
    ) -> None:
        field_direction(0.0, rotation_plane)  # validates the plane name
        self._anisotropy = anisotropy
        self._plane = rotation_plane
        self._m: Vec3 = _normalise(m0) if m0 is not None else anisotropy.easy_axis
        self._field_T = 0.0
        self._angle_deg = 0.0

    @property
    def magnetisation(self) -> Vec3:
        return self._m

    @property
    def field_T(self) -> float:
        return self._field_T

    @property
    def angle_deg(self) -> float:
        return self._angle_deg

    @property
    def rotation_plane(self) -> str:
        return self._plane

    def apply_field(self, field_T: float, angle_deg: float) -> Vec3:
        if not (math.isfinite(field_T) and math.isfinite(angle_deg)):
            raise ValueError("field_T and angle_deg must be finite")
        f0, a0 = self._field_T, self._angle_deg
        n = self._substeps(f0, a0, field_T, angle_deg)
        m = self._m
        for k in range(1, n + 1):
            s = k / n
            b = field_vector(f0 + s * (field_T - f0), a0 + s * (angle_deg - a0), self._plane)
            m = relax(m, b, self._anisotropy)
        self._m = m
        self._field_T, self._angle_deg = field_T, angle_deg
        return m

    def _substeps(self, f0: float, a0: float, f1: float, a1: float) -> int:
        turn = abs(a1 - a0)
        # A monotonic magnitude ramp at fixed angle enters a switching region at most
        # once and never leaves it, so descent at the end point gives the same branch.
        # The angle of a zero field is meaningless: the path is a ramp at the other angle.
        if turn <= MAX_SUBSTEP_DEG or f0 == 0.0 or f1 == 0.0:
            return 1
        weakest = 0.0 if f0 * f1 < 0.0 else min(abs(f0), abs(f1))
        in_plane = self._plane == "xy" and abs(self._m[2]) < 1e-12
        if weakest > self._anisotropy.uniqueness_field_T(in_plane):
            return 1
        return math.ceil(turn / MAX_SUBSTEP_DEG)

"""Six-membered-ring geometry: Cremer–Pople puckering, ring templates, ring-form and substituent-orientation labels.

Puckering coordinates follow D. Cremer and J. A. Pople, J. Am. Chem. Soc. 1975, 97, 1354 ("A general
definition of ring puckering coordinates"). For a six-membered ring with atoms j = 0..5 (ordered around
the ring) and positions r_j relative to their centroid:

    R' = sum_j r_j sin(2 pi j / 6),   R'' = sum_j r_j cos(2 pi j / 6),   n = R' x R'' / |R' x R''|
    z_j = r_j . n
    q2 cos(phi2) =  sqrt(2/6) sum_j z_j cos(4 pi j / 6)
    q2 sin(phi2) = -sqrt(2/6) sum_j z_j sin(4 pi j / 6)
    q3           =  sqrt(1/6) sum_j (-1)^j z_j
    Q = sqrt(q2^2 + q3^2),  theta = atan2(q2, q3) in [0, 180],  phi = phi2 in [0, 360)

and the inverse (the displacements of a ring with given puckering):

    z_j = sqrt(2/6) q2 cos(phi2 + 4 pi j / 6) + sqrt(1/6) q3 (-1)^j.

On this sphere a chair sits at the poles (theta = 0 or 180 deg), the six boats at theta = 90 deg,
phi = k*60 deg and the six twist-boats at theta = 90 deg, phi = 30 + k*60 deg; envelopes lie near
theta = 54.7 deg, phi = k*60 deg and half-chairs near theta = 50.8 deg, phi = 30 + k*60 deg (and their
mirror latitudes 180 - theta). These positions are from memory of J. C. A. Boeyens, J. Cryst. Mol.
Struct. 1978, 8, 317; the envelope/boat/twist-boat positions also follow directly from the inverse above.

Orientation of a substituent is measured, never assumed: at its ring atom the two exocyclic "slots"
are built from the ring geometry alone (tetrahedral directions in the plane bisecting the endocyclic
angle, perpendicular to the local C-X-C plane); the bond is assigned to the slot it is closer to, and the
slot's elevation above the Cremer–Pople mean plane is compared with the other slot's (see `orientation`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from .chem import dihedral
from .errors import ChairqmError

# ---- classification thresholds (degrees / Å); tested in tests/test_ring.py -------------------------
Q_PLANAR_MAX = 0.10          # Å: total puckering amplitude below this → 'other' (essentially planar)
CHAIR_THETA_MAX = 35.0       # deg: chair if theta <= 35 or theta >= 145
# deg: the same for a ring with a flat (sp2) ring atom (C=O, C=CH2, an amide N). Such a ring has no ideal
# chair: its chair is flattened towards the envelope (sofa, theta = 54.7) at that atom, one basin with it
# (1,3-dioxan-5-one's two chair-like minima lie at theta of about 35 and 51 with GFN2-xTB), so the polar
# caps up to this latitude, short of the boat / twist-boat band, are its chairs
CHAIR_THETA_MAX_FLAT_ATOM = 60.0
EQUATOR_THETA_MIN = 65.0     # deg: boat / twist-boat if 65 <= theta <= 115
PHI_TOL = 12.0               # deg: |phi - ideal| allowed for boat, twist-boat, envelope, half-chair
# deg: a ring atom whose ring bonds and one exocyclic bond have bond angles summing to at least this is
# trigonal (tetrahedral: 328.4; planar: 360). GFN2-xTB minima measured here: N-acetyl-2-methylpiperidine
# 355-360, N-phenyl-2-methylpiperidine 343-357, piperidine N-H and N-alkyl well below 340.
PLANAR_ANGLE_SUM = 350.0
ISOCLINAL_TOL = 20.0         # deg: slots whose |elevation| differ by less than this are 'isoclinal'

FORMS = ("chair", "twist-boat", "boat", "half-chair", "envelope", "other")

# Tetrahedral half-angle between the two exocyclic bonds: acos(-1/3)/2 = 54.7356 deg.
_HALF_TETRAHEDRAL = 0.5 * math.acos(-1.0 / 3.0)


@dataclass(frozen=True)
class Pucker:
    """Cremer–Pople puckering of a six-membered ring: amplitude q [Å], theta [deg 0..180], phi [deg 0..360)."""
    q: float
    theta: float
    phi: float
    q2: float = float("nan")
    q3: float = float("nan")


def mean_plane(coords) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Centroid, unit normal n and out-of-plane displacements z_j of a ring (Cremer & Pople 1975)."""
    x = np.asarray(coords, dtype=float)
    if x.ndim != 2 or x.shape[1] != 3 or not 4 <= x.shape[0] <= 8:
        raise ValueError(f"need an (N, 3) array of ring coordinates (N = 4 to 8), got shape {x.shape}")
    c = x.mean(axis=0)
    r = x - c
    n_at = x.shape[0]
    ang = 2.0 * np.pi * np.arange(n_at) / n_at
    r1 = (r * np.sin(ang)[:, None]).sum(axis=0)
    r2 = (r * np.cos(ang)[:, None]).sum(axis=0)
    n = np.cross(r1, r2)
    norm = np.linalg.norm(n)
    if norm < 1e-12:
        raise ValueError("degenerate ring coordinates: the mean plane is undefined")
    n = n / norm
    return c, n, r @ n


def cremer_pople(coords) -> Pucker:
    """Cremer–Pople Q, theta, phi of six ring atoms given in ring order (J. Am. Chem. Soc. 1975, 97, 1354)."""
    if np.asarray(coords).shape != (6, 3):
        raise ValueError(f"need a (6, 3) array of ring coordinates, got shape {np.asarray(coords).shape}")
    _, _, z = mean_plane(coords)
    j = np.arange(6)
    a = 4.0 * np.pi * j / 6.0
    q2c = math.sqrt(2.0 / 6.0) * float(np.sum(z * np.cos(a)))
    q2s = -math.sqrt(2.0 / 6.0) * float(np.sum(z * np.sin(a)))
    q3 = math.sqrt(1.0 / 6.0) * float(np.sum(z * (-1.0) ** j))
    q2 = math.hypot(q2c, q2s)
    q = math.hypot(q2, q3)
    theta = math.degrees(math.atan2(q2, q3))
    phi = math.degrees(math.atan2(q2s, q2c)) % 360.0
    if phi >= 360.0 - 1e-9:
        phi = 0.0
    return Pucker(q=q, theta=theta, phi=phi, q2=q2, q3=q3)


def displacements(q: float, theta: float, phi: float) -> np.ndarray:
    """Out-of-plane displacements z_j for given puckering (inverse of Cremer & Pople 1975)."""
    t, p = math.radians(theta), math.radians(phi)
    q2, q3 = q * math.sin(t), q * math.cos(t)
    j = np.arange(6)
    return (math.sqrt(2.0 / 6.0) * q2 * np.cos(p + 4.0 * np.pi * j / 6.0)
            + math.sqrt(1.0 / 6.0) * q3 * (-1.0) ** j)


def ring_from_pucker(q: float, theta: float, phi: float, bond_length=1.53) -> np.ndarray:
    """Ring-atom coordinates (6, 3) with the given Cremer–Pople puckering and bond lengths.

    Method: the displacements z_j come from the Cremer–Pople inverse (`displacements`); only the atoms' projections
    onto the mean plane are to be found.
      1. Starting guess: projections on a regular hexagon at polar angles -60 deg * j (clockwise, so
         that the Cremer–Pople normal R' x R'' points along +z) of radius sqrt(mean_j(L_j^2 - (z_{j+1} - z_j)^2))
         (law of cosines for a 60 deg angle).
      2. The in-plane positions are refined by least squares on the bond-length errors (weight
         1000/Å) and the spread of the six bond angles (rad), so the bond angles are as nearly equal as
         the bonds allow (D3d chairs, D2 twist-boats for equal bonds).
      3. Gauss–Newton steps on the bond-length errors alone (minimum-norm corrections) make every
         bond j–(j+1) equal to L_j within 1e-8 Å; otherwise ChairqmError.
    Because the z_j contain only the m = 2 and m = 3 Fourier components, the Cremer–Pople mean plane
    of the result is exactly z = 0 whatever the in-plane positions, so `cremer_pople` returns
    (q, theta, phi) again. The centroid is put at the origin and atom 0 on the +x axis.
    `bond_length` is one value or six, bond j joining atoms j and j+1 (mod 6).
    """
    lengths = np.broadcast_to(np.asarray(bond_length, dtype=float), (6,)).copy()
    if np.any(lengths <= 0):
        raise ChairqmError("ring bond lengths must be positive")
    z = displacements(q, theta, phi)
    dz = np.roll(z, -1) - z
    chord2 = lengths ** 2 - dz ** 2
    if np.any(chord2 <= 0.05 * lengths ** 2):
        raise ChairqmError(f"puckering amplitude q = {q:.3f} Å is too large for ring bonds of "
                           f"{lengths.min():.3f} Å: use a smaller q")

    rho = np.full(6, math.sqrt(chord2.mean()))
    psi = -2.0 * np.pi * np.arange(6) / 6.0
    xy0 = np.column_stack([rho * np.cos(psi), rho * np.sin(psi)])

    prev, nxt = np.roll(np.arange(6), 1), np.roll(np.arange(6), -1)

    def geometry(v):
        """Bond angles, bond lengths and their Jacobians with respect to the in-plane coordinates."""
        p = np.column_stack([v.reshape(6, 2), z])
        a = p[prev] - p                       # to the previous atom
        b = p[nxt] - p                        # to the next atom (bond j)
        la, lb = np.linalg.norm(a, axis=1), np.linalg.norm(b, axis=1)
        c = np.clip(np.sum(a * b, axis=1) / (la * lb), -1.0, 1.0)
        ang = np.arccos(c)
        jb = np.zeros((6, 12))                # d|b_j| / d(x, y)
        jang = np.zeros((6, 12))              # d angle_j / d(x, y)
        ub = b / lb[:, None]
        dca = b / (la * lb)[:, None] - c[:, None] * a / (la ** 2)[:, None]
        dcb = a / (la * lb)[:, None] - c[:, None] * b / (lb ** 2)[:, None]
        s = -1.0 / np.maximum(np.sqrt(1.0 - c ** 2), 1e-12)
        for j in range(6):
            jb[j, 2 * nxt[j]:2 * nxt[j] + 2] += ub[j, :2]
            jb[j, 2 * j:2 * j + 2] -= ub[j, :2]
            jang[j, 2 * prev[j]:2 * prev[j] + 2] += s[j] * dca[j, :2]
            jang[j, 2 * nxt[j]:2 * nxt[j] + 2] += s[j] * dcb[j, :2]
            jang[j, 2 * j:2 * j + 2] -= s[j] * (dca[j, :2] + dcb[j, :2])
        return ang, lb, jang, jb, p

    def resid2(v):
        ang, bonds, _, _, _ = geometry(v)
        return np.concatenate([1.0e3 * (bonds - lengths), ang - ang.mean()])

    def jac2(v):
        _, _, jang, jb, _ = geometry(v)
        return np.vstack([1.0e3 * jb, jang - jang.mean(axis=0)])

    def resid3(v):
        return geometry(v)[1] - lengths

    def jac3(v):
        return geometry(v)[3]

    v = least_squares(resid2, xy0.ravel(), jac=jac2, xtol=1e-12, ftol=1e-12, gtol=1e-12, method="lm").x
    for _ in range(20):                       # Gauss–Newton, minimum-norm steps (underdetermined)
        r = resid3(v)
        if np.max(np.abs(r)) < 1e-12:
            break
        v = v - np.linalg.lstsq(jac3(v), r, rcond=None)[0]
    _, bonds, _, _, xyz = geometry(v)
    if np.max(np.abs(bonds - lengths)) > 1e-8:
        raise ChairqmError(f"no ring with q = {q:.3f} Å, theta = {theta:.1f}, phi = {phi:.1f} and bonds "
                           f"{np.round(lengths, 3).tolist()}: change the puckering")
    # fix the in-plane gauge (the residuals do not see in-plane shifts and rotations): centroid at the
    # origin, atom 0 on the +x axis
    xyz[:, :2] -= xyz[:, :2].mean(axis=0)
    a = math.atan2(xyz[0, 1], xyz[0, 0])
    c, s = math.cos(-a), math.sin(-a)
    xyz[:, :2] = xyz[:, :2] @ np.array([[c, s], [-s, c]])
    return xyz


def _phi_offset(phi: float, base: float) -> float:
    """Distance (deg) of phi from the nearest of base + k*60."""
    d = (phi - base) % 60.0
    return min(d, 60.0 - d)


def classify(pucker: Pucker, chair_theta_max: float = CHAIR_THETA_MAX) -> str:
    """Ring form from Cremer–Pople coordinates, with the module thresholds.

    'other' if Q < Q_PLANAR_MAX (nearly planar); 'chair' if theta <= chair_theta_max or >= 180 - it
    (CHAIR_THETA_MAX; `measure` passes CHAIR_THETA_MAX_FLAT_ATOM for a ring with a flat ring atom);
    on the equator band (EQUATOR_THETA_MIN <= theta <= 180 - it): 'boat' within PHI_TOL of k*60 deg,
    'twist-boat' within PHI_TOL of 30 + k*60 deg; in the band between: 'envelope' near k*60 deg and
    'half-chair' near 30 + k*60 deg; anything else 'other'. Positions of the forms: see module docstring.
    """
    if pucker.q < Q_PLANAR_MAX:
        return "other"
    t = pucker.theta
    if t <= chair_theta_max or t >= 180.0 - chair_theta_max:
        return "chair"
    near0 = _phi_offset(pucker.phi, 0.0) <= PHI_TOL
    near30 = _phi_offset(pucker.phi, 30.0) <= PHI_TOL
    if EQUATOR_THETA_MIN <= t <= 180.0 - EQUATOR_THETA_MIN:
        return "boat" if near0 else "twist-boat" if near30 else "other"
    return "envelope" if near0 else "half-chair" if near30 else "other"


def exocyclic_slots(positions, ring, k: int) -> tuple[np.ndarray, np.ndarray]:
    """The two ideal exocyclic bond directions (unit vectors) at ring position k, from ring geometry only.

    Tetrahedral directions: cos(a) u +/- sin(a) w with u the outward bisector of the endocyclic angle,
    w the normal of the plane of the atom and its two ring neighbours and a = acos(-1/3)/2 (common
    practice: the exocyclic bonds of an sp3 ring atom lie in the plane bisecting the endocyclic angle).
    """
    x = np.asarray(positions, dtype=float)
    r = x[ring[k]]
    a = x[ring[(k - 1) % 6]] - r
    b = x[ring[(k + 1) % 6]] - r
    a /= np.linalg.norm(a)
    b /= np.linalg.norm(b)
    u = -(a + b)
    u /= np.linalg.norm(u)
    w = np.cross(a, b)
    w /= np.linalg.norm(w)
    c, s = math.cos(_HALF_TETRAHEDRAL), math.sin(_HALF_TETRAHEDRAL)
    return c * u + s * w, c * u - s * w


def slot_elevations(positions, ring, k: int, normal=None) -> tuple[float, float]:
    """Elevations (deg, signed) of the two exocyclic slots at ring position k above the mean plane."""
    x = np.asarray(positions, dtype=float)
    if normal is None:
        _, normal, _ = mean_plane(x[list(ring)])
    d1, d2 = exocyclic_slots(x, ring, k)
    e1 = math.degrees(math.asin(max(-1.0, min(1.0, float(d1 @ normal)))))
    e2 = math.degrees(math.asin(max(-1.0, min(1.0, float(d2 @ normal)))))
    return e1, e2


def trigonal_ring_atoms(mol, ring) -> list[tuple[int, int]]:
    """(ring atom, its one exocyclic neighbour) for the ring atoms of an RDKit molecule (explicit H) with
    three neighbours (an amide or N-aryl ring N, a ring N-H, a ring C=O carbon): the ones `measure` may
    label 'planar'."""
    ring_set = {int(a) for a in ring}
    out = []
    for a in ring:
        atom = mol.GetAtomWithIdx(int(a))
        if atom.GetDegree() == 3:
            exo = [n.GetIdx() for n in atom.GetNeighbors() if n.GetIdx() not in ring_set]
            if len(exo) == 1:
                out.append((int(a), int(exo[0])))
    return out


def _is_flat(x, ring, k, exo: int) -> bool:
    """True when ring position k with three neighbours is flat: the bond angles to its two ring neighbours
    and to its exocyclic neighbour `exo` sum to PLANAR_ANGLE_SUM or more."""
    return _angle_sum(x, ring, k, int(exo)) >= PLANAR_ANGLE_SUM


def _angle_sum(x, ring, k, first_atom) -> float:
    a = x[ring[k]]
    vecs = [x[ring[k - 1]] - a, x[ring[(k + 1) % len(ring)]] - a, x[first_atom] - a]
    vecs = [v / np.linalg.norm(v) for v in vecs]
    total = 0.0
    for i, j in ((0, 1), (0, 2), (1, 2)):
        total += math.degrees(math.acos(max(-1.0, min(1.0, float(vecs[i] @ vecs[j])))))
    return total


def orientation(positions, ring, ring_atom: int, first_atom: int, form: str, trigonal: bool = False) -> str:
    """Orientation label of the bond ring_atom–first_atom, measured from the geometry.

    The bond is assigned to the nearer of the two exocyclic slots at its ring atom (`exocyclic_slots`);
    d = |elevation of that slot| - |elevation of the other slot| (elevations relative to the
    Cremer–Pople mean plane). Labels:
      chair:       'axial' if d > 0 else 'equatorial'
      boat:        at the bow and stern atoms (the two atoms farthest from the mean plane) 'flagpole'
                   if d > 0 else 'bowsprit'; at the other four atoms as for a twist-boat
      any form:    'planar' if `trigonal` (the ring atom has three neighbours) and it is flat (the sum of
                   its three bond angles, two in the
                   ring and the one to this bond, at least PLANAR_ANGLE_SUM): the N of an amide, carbamate
                   or N-aryl ring N, whose one exocyclic bond has no axial or equatorial side
      twist-boat, half-chair, envelope, other:
                   'pseudo-axial' if d > ISOCLINAL_TOL, 'pseudo-equatorial' if d < -ISOCLINAL_TOL,
                   else 'isoclinal' (a planar ring gives 'isoclinal' everywhere).
    """
    x = np.asarray(positions, dtype=float)
    ring = list(ring)
    if ring_atom not in ring:
        raise ValueError(f"atom {ring_atom} is not in the ring {ring}")
    k = ring.index(ring_atom)
    _, n, z = mean_plane(x[ring])
    d1, d2 = exocyclic_slots(x, ring, k)
    bond = x[first_atom] - x[ring_atom]
    bond = bond / np.linalg.norm(bond)
    if trigonal and _angle_sum(x, ring, k, first_atom) >= PLANAR_ANGLE_SUM:
        return "planar"
    mine, other = (d1, d2) if bond @ d1 >= bond @ d2 else (d2, d1)
    d = (math.degrees(math.asin(min(1.0, abs(float(mine @ n)))))
         - math.degrees(math.asin(min(1.0, abs(float(other @ n))))))
    if form == "chair":
        return "axial" if d > 0 else "equatorial"
    if form == "boat":
        bow = set(np.argsort(-np.abs(z), kind="stable")[:2].tolist())
        if k in bow:
            return "flagpole" if d > 0 else "bowsprit"
    if d > ISOCLINAL_TOL:
        return "pseudo-axial"
    if d < -ISOCLINAL_TOL:
        return "pseudo-equatorial"
    return "isoclinal"


def _sub_key(sid: str):
    s = str(sid)
    digits = "".join(ch for ch in s if ch.isdigit())
    return (int(digits) if digits else 10 ** 9, s)


def measure(positions, ring, substituents, other_rings=(), trigonal_atoms=()) -> dict:
    """Ring form, Q, theta, phi and the orientation string ('s1=axial;s2=equatorial') of one structure;
    with `other_rings` (chairqm.molecule.Perceived.other_rings) also 'other_rings': each other ring's form
    and the position on it of the bond towards the analysed ring ('r2=chair:equatorial'), '' for none.
    `trigonal_atoms`: (ring atom, exocyclic neighbour) of the ring atoms with three neighbours
    (`trigonal_ring_atoms`), whose one exocyclic bond is labelled 'planar' when the atom is flat."""
    x = np.asarray(positions, dtype=float)
    ring = list(ring)
    p = cremer_pople(x[ring])
    tri = {int(a): int(e) for a, e in trigonal_atoms}
    flat = any(_is_flat(x, ring, ring.index(a), e) for a, e in tri.items() if a in ring)
    form = classify(p, CHAIR_THETA_MAX_FLAT_ATOM if flat else CHAIR_THETA_MAX)
    subs = sorted(substituents, key=lambda s: _sub_key(s.id))
    text = ";".join(f"{s.id}={orientation(x, ring, s.ring_atom, s.first_atom, form, int(s.ring_atom) in tri)}"
                    for s in subs)
    out = {"ring_form": form, "q": p.q, "theta": p.theta, "phi": p.phi, "orientation": text}
    if other_rings:
        out["other_rings"] = other_ring_states(x, other_rings)
    return out


def other_ring_states(positions, other_rings) -> str:
    """'r2=chair:equatorial;r3=twist-boat:pseudo-axial': per other ring its form (Cremer–Pople, as for the
    analysed ring) and the orientation on it of its link towards the analysed ring; for each inverting
    ring N of a six-membered one ('nitrogens', chairqm.other_rings.inverting_nitrogens) also the side of
    its exocyclic bond, as its own part: 'r2.N9-H=axial' (atom index 0-based, then the neighbour's
    element)."""
    x = np.asarray(positions, dtype=float)
    parts = []
    for o in other_rings:
        if len(o["atoms"]) == 4:
            parts.append(f"{o['label']}={four_ring_state(x, o['atoms'], o['link_atom'], o['link_to'])}")
            continue
        if len(o["atoms"]) == 5:
            form5 = five_ring_form(x[list(o["atoms"])])
            if o.get("fused"):
                parts.append(f"{o['label']}={form5}")
            else:                          # a ring in a group: also the side of its link (as for four)
                parts.append(f"{o['label']}={form5}:{_link_side(x, o['atoms'], o['link_atom'], o['link_to'])}")
            continue
        form = classify(cremer_pople(x[list(o["atoms"])]))
        parts.append(f"{o['label']}={form}:{orientation(x, list(o['atoms']), o['link_atom'], o['link_to'], form)}")
        for n, nx, el in o.get("nitrogens", ()):
            parts.append(f"{o['label']}.N{n}-{el}={orientation(x, list(o['atoms']), n, nx, form)}")
    return ";".join(parts)


def five_ring_form(coords) -> str:
    """'envelope' or 'twist' (or 'planar') of a five-membered ring given in ring order, from its
    Cremer–Pople phase angle (J. Am. Chem. Soc. 1975, 97, 1354): q2 cos phi2 = sqrt(2/5) sum z_j
    cos(4 pi j / 5), q2 sin phi2 = -sqrt(2/5) sum z_j sin(4 pi j / 5). Along the pseudorotation path the
    ten envelopes sit at phi2 = 0, 36, 72, ... deg and the ten twists halfway between; the nearer one
    names the form. Planar when q2 is below 0.1 Å."""
    _, _, z = mean_plane(np.asarray(coords, dtype=float))
    j = np.arange(5)
    a = 4.0 * np.pi * j / 5.0
    c = math.sqrt(2.0 / 5.0) * float(np.sum(z * np.cos(a)))
    s = -math.sqrt(2.0 / 5.0) * float(np.sum(z * np.sin(a)))
    if math.hypot(c, s) < 0.1:
        return "planar"
    phi = math.degrees(math.atan2(s, c)) % 36.0
    return "envelope" if min(phi, 36.0 - phi) < 9.0 else "twist"


#: |ring torsion| (deg) below which a four-membered ring counts as planar. Puckered cyclobutane has ring
#: torsions near 20-27 deg (gas-phase electron diffraction, from memory); oxetane is nearly planar.
FOUR_RING_PLANAR_DEG = 8.0


def four_ring_state(positions, atoms, link_atom: int, link_to: int) -> str:
    """'puckered:pseudo-equatorial' (or pseudo-axial; 'planar:isoclinal') of a four-membered ring given in
    ring order: puckered when its first ring torsion exceeds FOUR_RING_PLANAR_DEG; the link bond is
    pseudo-axial when it makes less than 45 deg with the normal of the ring's least-squares plane, and
    pseudo-equatorial otherwise (the two exocyclic positions of a puckered ring differ in just that)."""
    x = np.asarray(positions, dtype=float)
    r = x[list(atoms)]
    tau = dihedral(r[0], r[1], r[2], r[3])
    if abs(tau) < FOUR_RING_PLANAR_DEG:
        return "planar:isoclinal"
    return "puckered:" + _link_side(x, atoms, link_atom, link_to)


def _link_side(x, atoms, link_atom: int, link_to: int) -> str:
    """'pseudo-axial' when the link bond makes less than 45 deg with the normal of the ring's least-squares
    plane, else 'pseudo-equatorial' (four- and five-membered rings in groups)."""
    c = x[list(atoms)] - x[list(atoms)].mean(axis=0)
    normal = np.linalg.svd(c)[2][-1]
    bond = x[link_to] - x[link_atom]
    cos = abs(float(bond @ normal)) / float(np.linalg.norm(bond))
    return "pseudo-axial" if cos > math.cos(math.radians(45.0)) else "pseudo-equatorial"


def ring_torsions(coords) -> np.ndarray:
    """The six endocyclic torsion angles (deg) of a ring given in ring order; torsion j is atoms j..j+3."""
    x = np.asarray(coords, dtype=float)
    out = []
    for j in range(6):
        p0, p1, p2, p3 = (x[(j + i) % 6] for i in range(4))
        out.append(dihedral(p0, p1, p2, p3))
    return np.array(out)

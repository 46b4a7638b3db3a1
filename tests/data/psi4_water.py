# Input for Psi4 (a second, independent quantum-chemistry program; Debian package psi4 1:1.3.2+dfsg-5):
#     psi4 tests/data/psi4_water.py
# prints the RHF, B3LYP and PBE0 / def2-SVP total energies of water at the experimental equilibrium
# geometry r(OH) = 0.9572 A, angle HOH = 104.52 deg (Hoy, Bunker, J. Mol. Spectrosc. 1979, 74, 1; from
# memory), with exact integrals (no density fitting) and a (200, 974) integration grid.  The printed
# values are stored in tests/test_refine.py as the second program's reference.
import psi4

psi4.set_memory("2 GB")
psi4.set_num_threads(1)
psi4.core.set_output_file("psi4_water.out", False)
psi4.geometry("""
0 1
O   0.000000000000   0.000000000000   0.000000000000
H   0.957200000000   0.000000000000   0.000000000000
H  -0.239987208409   0.926627206486   0.000000000000
units angstrom
symmetry c1
no_reorient
no_com
""")
psi4.set_options({"basis": "def2-svp", "scf_type": "pk", "puream": True, "e_convergence": 1e-11,
                  "d_convergence": 1e-10, "dft_radial_points": 200, "dft_spherical_points": 974,
                  "dft_basis_tolerance": 1e-14})
for method in ("hf", "b3lyp", "pbe0"):
    print(method, "%.10f" % psi4.energy(method))

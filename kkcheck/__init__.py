"""kkcheck: vet optical-constant data.

Read tables of n,k or eps1,eps2 from several instruments, merge them onto one photon-energy
axis, flag spikes and steps, test Kramers–Kronig consistency, repair, and fit a passive,
stable pole-residue model. See README.md for the command line and DEVELOPERS.md for the layout.
"""

__version__ = "0.1.0"

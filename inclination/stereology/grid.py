"""The equal-area grid of plane normals in the crystal frame C (conventions §4).

A plane is its normal up to sign (n ≡ −n), so normals live on the upper
hemisphere n_z >= 0 of C. The hemisphere is cut into rings of equal width in
u = n_z = cos θ (equal width in cos θ is equal area, Archimedes' hat-box
theorem) and every ring into sectors of equal azimuth φ from X_C toward Y_C:
every bin covers 2π / (n_polar · n_azimuth) steradians. A resolution of r degrees
gives round(90 / r) rings and round(360 / r) sectors, i.e. bins about r° wide at
the equator (the rings near the pole are longer in θ: the price of equal area).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["HemisphereGrid"]


@dataclass(frozen=True)
class HemisphereGrid:
    """Equal-area bins of the upper hemisphere of C; bin ``ring * n_azimuth + sector``.

    Attributes
    ----------
    resolution_deg : float
        The nominal bin width asked for, degrees.
    n_polar : int
        Rings, equal steps of u = n_z in [0, 1] (ring 0 at the equator).
    n_azimuth : int
        Sectors, equal steps of φ in [0°, 360°) from X_C toward Y_C.

    Examples
    --------
    >>> grid = HemisphereGrid.from_resolution_deg(10.0)
    >>> grid.n_polar, grid.n_azimuth, grid.n_bins
    (9, 36, 324)
    >>> grid.bin_of(np.array([[0.6, 0.0, 0.8], [-0.6, 0.0, -0.8]])).tolist()
    [252, 252]
    """

    resolution_deg: float
    n_polar: int
    n_azimuth: int

    @classmethod
    def from_resolution_deg(cls, resolution_deg: float) -> HemisphereGrid:
        """The grid whose bins are about ``resolution_deg`` wide at the equator (1° to 30°)."""
        r = float(resolution_deg)
        if not (np.isfinite(r) and 1.0 <= r <= 30.0):
            raise ValueError(f"Expected `resolution_deg` to be in [1, 30], got {resolution_deg!r}.")
        return cls(r, max(1, round(90.0 / r)), max(4, round(360.0 / r)))

    @property
    def n_bins(self) -> int:
        """Number of bins, ``n_polar * n_azimuth``."""
        return self.n_polar * self.n_azimuth

    @property
    def solid_angle_sr(self) -> float:
        """Solid angle of one bin (all equal), steradians."""
        return 2.0 * np.pi / self.n_bins

    def bin_of(self, normals_crystal: np.ndarray) -> np.ndarray:
        """Bin index of each normal (either sign; unit length assumed), shape (...,)."""
        n = np.asarray(normals_crystal, dtype=float)
        return self.bin_of_components(n[..., 0], n[..., 1], n[..., 2])

    def bin_of_components(self, x: np.ndarray, y: np.ndarray, z: np.ndarray) -> np.ndarray:
        """:meth:`bin_of` from the three components as separate arrays (faster when contiguous).

        float32 components are binned in float32: a normal within about 1e-7 of a bin edge
        may then fall on either side of it.
        """
        ring = np.abs(z) * self.n_polar
        ring = np.minimum(ring.astype(np.int64), self.n_polar - 1)
        # n and -n are one plane: a normal below the equator is turned by 180° (φ + π).
        phi = np.arctan2(y, x)
        phi += (z < 0) * phi.dtype.type(np.pi)
        phi *= phi.dtype.type(self.n_azimuth / (2.0 * np.pi))
        sector = np.floor(phi).astype(np.int64) % self.n_azimuth
        ring *= self.n_azimuth
        ring += sector
        return ring

    def centres_crystal(self) -> np.ndarray:
        """Unit normal at the centre of each bin (mid u, mid φ), shape (n_bins, 3)."""
        u = (np.arange(self.n_polar) + 0.5) / self.n_polar
        phi = (np.arange(self.n_azimuth) + 0.5) * (2.0 * np.pi / self.n_azimuth)
        uu, pp = np.meshgrid(u, phi, indexing="ij")
        s = np.sqrt(1.0 - uu**2)
        return np.stack([s * np.cos(pp), s * np.sin(pp), uu], axis=-1).reshape(-1, 3)

    def as_dict(self) -> dict:
        """JSON-ready description of the grid and of the order of the bins."""
        return {
            "kind": "equal-area hemisphere",
            "hemisphere": "upper, n_z >= 0 of the crystal frame C (n and -n are one plane)",
            "resolution_deg": self.resolution_deg,
            "n_polar": self.n_polar,
            "n_azimuth": self.n_azimuth,
            "n_bins": self.n_bins,
            "polar": "ring i holds i/n_polar <= n_z < (i+1)/n_polar (equal area)",
            "azimuth": "sector j holds j*360/n_azimuth <= phi < (j+1)*360/n_azimuth, "
            "phi from X_C toward Y_C",
            "order": "bin = ring * n_azimuth + sector",
        }

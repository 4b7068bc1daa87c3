"""Localised SAR exposure limits: a small table of published values.

Each row is an :class:`ExposureLimit` holding the averaging mass, the limit value, the body
region it applies to and the text it comes from. Only the general-population (uncontrolled /
general public) local limits for the 100 kHz - 6 GHz range are listed, which covers the
401-406 MHz medical band and the 433 / 915 / 2450 MHz ISM bands.

Sources
-------
* 47 CFR 1.1310 (US Code of Federal Regulations, Title 47, Radiofrequency radiation exposure
  limits), paragraph (c): general population / uncontrolled exposure, partial-body SAR
  1.6 W/kg averaged over any 1 g of tissue (cube-shaped).
* ICNIRP 2020, "Guidelines for limiting exposure to electromagnetic fields (100 kHz to 300 GHz)",
  Health Physics 118(5):483-524, Table 2 (basic restrictions, 100 kHz - 6 GHz): general public
  local SAR 2 W/kg over 10 g for head & trunk, 4 W/kg over 10 g for limbs (averaged over 6 min,
  10 g cubic mass).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["ExposureLimit", "FCC_1G_PARTIAL_BODY", "ICNIRP_10G_HEAD_TRUNK", "ICNIRP_10G_LIMBS",
           "default_limits", "limit_table"]


@dataclass(frozen=True)
class ExposureLimit:
    """One localised SAR limit.

    Parameters
    ----------
    name : str
        Short plain identifier of the row.
    mass_kg : float
        Averaging mass in kg (1 g = 1e-3 kg), > 0.
    limit_W_per_kg : float
        Limit on the peak mass-averaged SAR in W/kg, > 0.
    region : str
        Body region / exposure category the limit applies to.
    source : str
        Citation of the text the value comes from.
    """

    name: str
    mass_kg: float
    limit_W_per_kg: float
    region: str
    source: str

    def __post_init__(self):
        for field, value in (("mass_kg", self.mass_kg), ("limit_W_per_kg", self.limit_W_per_kg)):
            if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
                raise ValueError(f"exposure limit {self.name!r}: {field} must be a finite number > 0, "
                                 f"got {value!r}")
        if not self.source.strip():
            raise ValueError(f"exposure limit {self.name!r}: source must name the text the value comes from")

    def to_dict(self) -> dict:
        """Row as ``{name, mass_kg, limit_W_per_kg, region, source}`` (the study/solver limit form)."""
        return {"name": self.name, "mass_kg": self.mass_kg, "limit_W_per_kg": self.limit_W_per_kg,
                "region": self.region, "source": self.source}


# 47 CFR 1.1310(c): general population/uncontrolled exposure, partial-body SAR not exceeding
# 1.6 W/kg "as averaged over any 1 gram of tissue (defined as a tissue volume in the shape of a cube)".
FCC_1G_PARTIAL_BODY = ExposureLimit(
    name="fcc_1g_partial_body", mass_kg=1e-3, limit_W_per_kg=1.6,
    region="partial body (general population / uncontrolled)",
    source="47 CFR 1.1310(c), general population/uncontrolled, partial-body SAR over 1 g")

# ICNIRP 2020, Health Physics 118(5), Table 2, 100 kHz - 6 GHz, general public, local SAR
# (head and trunk): 2 W/kg averaged over 10 g (cubic mass), 6 min.
ICNIRP_10G_HEAD_TRUNK = ExposureLimit(
    name="icnirp2020_10g_head_trunk", mass_kg=1e-2, limit_W_per_kg=2.0,
    region="head and trunk (general public)",
    source="ICNIRP 2020 guidelines (100 kHz to 300 GHz), Health Phys. 118(5), Table 2, "
           "general public local SAR head & trunk over 10 g")

# ICNIRP 2020, Health Physics 118(5), Table 2, 100 kHz - 6 GHz, general public, local SAR
# (limbs): 4 W/kg averaged over 10 g (cubic mass), 6 min.
ICNIRP_10G_LIMBS = ExposureLimit(
    name="icnirp2020_10g_limbs", mass_kg=1e-2, limit_W_per_kg=4.0,
    region="limbs (general public)",
    source="ICNIRP 2020 guidelines (100 kHz to 300 GHz), Health Phys. 118(5), Table 2, "
           "general public local SAR limbs over 10 g")


def default_limits() -> tuple[ExposureLimit, ...]:
    """The two limits evaluated by default: 1.6 W/kg over 1 g and 2 W/kg over 10 g.

    Returns
    -------
    tuple of ExposureLimit
        ``(FCC_1G_PARTIAL_BODY, ICNIRP_10G_HEAD_TRUNK)``.
    """
    return (FCC_1G_PARTIAL_BODY, ICNIRP_10G_HEAD_TRUNK)


def limit_table() -> tuple[ExposureLimit, ...]:
    """Every row of the table.

    Returns
    -------
    tuple of ExposureLimit
        FCC 1 g partial body, ICNIRP 10 g head & trunk, ICNIRP 10 g limbs.
    """
    return (FCC_1G_PARTIAL_BODY, ICNIRP_10G_HEAD_TRUNK, ICNIRP_10G_LIMBS)

"""Built-in material library (SI units).

conductivity W/(m·K) (a scalar, or (kx, ky, kz) for orthotropic), density kg/m³,
specific heat J/(kg·K). Values are typical room-temperature figures; the source of each
is named beside it. "from memory" means recalled from general engineering references and
not re-checked against a printed table; "common practice" means a figure the trade uses
as a default without a single source. Real parts vary: use datasheet values when you have
them (add them under "materials" in the model file).
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Material:
    conductivity: tuple  # (kx, ky, kz) in W/(m·K)
    density: float  # kg/m³
    specific_heat: float  # J/(kg·K)
    note: str = ""
    source: str = ""

    @property
    def isotropic(self) -> bool:
        return len(set(self.conductivity)) == 1

    @property
    def volumetric_heat_capacity(self) -> float:
        """ρ·c in J/(m³·K)."""
        return self.density * self.specific_heat

    def to_json(self) -> dict:
        k = self.conductivity[0] if self.isotropic else list(self.conductivity)
        return {"conductivity": k, "density": self.density, "specific_heat": self.specific_heat}


def _iso(k, rho, cp, note, source):
    return Material((float(k),) * 3, float(rho), float(cp), note, source)


BUILTIN_MATERIALS: dict[str, Material] = {
    # Metals
    "aluminium-6061": _iso(167.0, 2700.0, 896.0, "wrought aluminium alloy (T6), machined housings and plates",
                           "Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, Table A.1 (Al 2024 is 177); "
                           "6061-T6 from the ASM Metals Handbook, from memory"),
    "aluminium-cast-a380": _iso(96.0, 2710.0, 963.0, "die-cast aluminium alloy, cast housings",
                                "ASM Metals Handbook Vol. 2, die casting alloy A380, from memory"),
    "copper": _iso(401.0, 8933.0, 385.0, "pure copper, spreaders and bus bars",
                   "Incropera & DeWitt, Table A.1, pure copper at 300 K"),
    "steel-mild": _iso(60.5, 7854.0, 434.0, "plain carbon steel, chassis and brackets",
                       "Incropera & DeWitt, Table A.1, plain carbon steel at 300 K"),
    "stainless-304": _iso(14.9, 7900.0, 477.0, "austenitic stainless steel, outdoor housings and fasteners",
                          "Incropera & DeWitt, Table A.1, AISI 304 at 300 K"),
    # Semiconductors and ceramics
    "silicon": _iso(148.0, 2330.0, 712.0, "silicon die",
                    "Incropera & DeWitt, Table A.1, silicon at 300 K"),
    "alumina-96": _iso(24.0, 3720.0, 880.0, "96 % alumina ceramic substrate",
                       "typical supplier data sheets for 96 % Al2O3 substrates, from memory"),
    # Boards and packages
    "fr4-bare": Material((0.81, 0.81, 0.29), 1850.0, 1100.0,
                         "glass-epoxy laminate without copper (in-plane / through-thickness)",
                         "typical laminate data sheets: in-plane about 0.8, through-plane about 0.3, from memory"),
    "pcb-4layer-effective": Material((30.0, 30.0, 0.4), 2200.0, 1000.0,
                                     "effective 4-layer board with about 1 oz copper planes, board in the x-y plane",
                                     "parallel/series rule of mixtures for copper layers in glass-epoxy; "
                                     "common practice, no source"),
    "mould-compound": _iso(0.9, 1900.0, 880.0, "epoxy mould compound of plastic IC packages",
                           "typical package material data sheets, from memory"),
    # Interface and fill materials
    "gap-pad-3w": _iso(3.0, 3000.0, 1000.0, "filled silicone gap pad, nominal 3 W/(m·K)",
                       "typical gap-filler data sheets, from memory"),
    "potting-epoxy": _iso(0.6, 1600.0, 1100.0, "thermally filled epoxy potting compound",
                          "typical potting compound data sheets, from memory"),
    # Enclosure plastics
    "abs": _iso(0.17, 1050.0, 1400.0, "ABS moulded housing",
                "Engineering ToolBox-type polymer property tables, from memory"),
    "polycarbonate": _iso(0.20, 1200.0, 1250.0, "polycarbonate housing or window",
                          "polymer handbook tables, from memory"),
    "pa66-gf30": _iso(0.30, 1360.0, 1500.0, "glass-filled polyamide housing",
                      "supplier data sheets for PA66 GF30, from memory"),
    # Air pocket (still air as a solid: conduction only, for sealed gaps)
    "still-air": _iso(0.026, 1.16, 1007.0, "sealed still air treated as a conducting solid (no convection inside)",
                      "Incropera & DeWitt, Table A.4, air at 300 K"),
}

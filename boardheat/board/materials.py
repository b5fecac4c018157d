"""Built-in materials with the source of every value.

Values are room-temperature properties. Handbook values are cited by table; values recalled
from memory or typical of datasheets are marked so, and users should override them from their
laminate supplier's datasheet through the board file's ``[materials]`` table.
"""

from __future__ import annotations

from boardheat.board.model import Material

#: 1 oz/ft^2 of copper foil is 34.8 um thick (IPC-4562 nominal; recalled from memory).
OZ_COPPER_M = 34.8e-6

BUILTIN_MATERIALS: dict[str, Material] = {
    "copper": Material(
        name="copper",
        # Incropera & DeWitt, Fundamentals of Heat and Mass Transfer, Table A.1 (pure copper,
        # 300 K): rho = 8933 kg/m^3, cp = 385 J/(kg K), k = 401 W/(m K). Electrodeposited PCB
        # foil conducts somewhat less; 390 W/(m K) is common practice.
        k_inplane=390.0,
        k_through=390.0,
        rho_c=8933.0 * 385.0,
        source="Incropera Table A.1 (rho, cp); k = 390 W/(m K) common practice for ED foil",
    ),
    "fr4": Material(
        name="fr4",
        # Woven glass/epoxy laminate: in-plane ~0.8, through-plane ~0.3 W/(m K),
        # rho ~1850 kg/m^3, cp ~1100 J/(kg K). Handbook ranges, recalled from memory.
        k_inplane=0.8,
        k_through=0.3,
        rho_c=1850.0 * 1100.0,
        source="typical FR-4 laminate values, recalled from memory (handbook ranges)",
    ),
    "polyimide": Material(
        name="polyimide",
        # Polyimide film: k ~0.12 W/(m K), rho ~1420 kg/m^3, cp ~1090 J/(kg K); recalled.
        k_inplane=0.12,
        k_through=0.12,
        rho_c=1420.0 * 1090.0,
        source="typical polyimide film values, recalled from memory",
    ),
    "aluminium": Material(
        name="aluminium",
        # Incropera & DeWitt, Table A.1: aluminium alloy 2024-T6 at 300 K: k = 177 W/(m K),
        # rho = 2770 kg/m^3, cp = 875 J/(kg K). Metal-core boards often use 5052/6061 with
        # k ~140-170 W/(m K) (recalled from memory).
        k_inplane=177.0,
        k_through=177.0,
        rho_c=2770.0 * 875.0,
        source="Incropera Table A.1, aluminium alloy 2024-T6, 300 K",
    ),
    "mcpcb_dielectric": Material(
        name="mcpcb_dielectric",
        # Ceramic-filled epoxy insulating layer of metal-core boards: 1-3 W/(m K) is the
        # usual datasheet range (recalled from memory); 2.0 taken here.
        k_inplane=2.0,
        k_through=2.0,
        rho_c=2000.0 * 1000.0,
        source="typical filled-epoxy insulating layer, recalled from memory",
    ),
}

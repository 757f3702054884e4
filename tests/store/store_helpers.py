"""Constants shared by the store and CLI tests."""

from pathlib import Path

HEADER = (
    "kind,value,qty,bin,tolerance,unit_cost,voltage_v,power_w,dielectric,dcr_ohm,isat_a,name,"
    "hfe_min,hfe_max,vbe_v,ft_hz,cob_f,vaf_v,vceo_v,pd_w,note"
)
REPO = Path(__file__).resolve().parents[2]
DEMO_CSV = REPO / "data" / "demo_stock.csv"

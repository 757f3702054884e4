"""Rendering of a reorder plan: the shopping list per supplier, each build's design and sources,
the stock left, as rich text, JSON-ready dicts and CSV rows."""

from __future__ import annotations

from rich.console import Group
from rich.table import Table
from rich.text import Text

from picker.units import format_eng, format_value, natural_key

#: CSV columns of the shopping list, in order.
CSV_COLUMNS = ("supplier", "sku", "kind", "value", "tolerance", "voltage_v", "power_w", "dielectric", "dcr_ohm",
               "name", "packs", "pack", "qty", "unit_price", "cost")
CAUTION = ("caution: parts bought to these values still need the ratings the check assumed (capacitor voltage at the "
           "supply with margin, resistor power); check what arrives before fitting it.  An oscillator radiates: keep "
           "it shielded and low in power, and follow your local radio rules and licensed practice.")


def _value_text(kind: str, value, name=None) -> str:
    return name if kind == "npn" else format_value(value, kind)


def _item_value(it) -> str:
    return _value_text(it.kind, it.get("value"), it.get("name"))


def _ratings(it) -> str:
    out = []
    if it.get("tolerance") is not None:
        out.append(f"{it.get('tolerance'):.0%}" if it.get("tolerance") >= 0.01 else f"{it.get('tolerance'):.1%}")
    for col, unit in (("voltage_v", "V"), ("power_w", "W"), ("dcr_ohm", "Ω")):
        if it.get(col) is not None:
            out.append(format_eng(it.get(col), unit))
    if it.get("dielectric"):
        out.append(str(it.get("dielectric")))
    return " ".join(out)


def _target_text(t) -> str:
    return f"{format_eng(t.freq_hz, 'Hz')} ±{t.tol:.1%} x {t.boards}"


def build_rows(b) -> list[dict]:
    """One row per key of a build: designators, value, units from stock and from the order."""
    topo = b.candidate.design.topo
    by_key: dict = {}
    for ref, r in b.refs.items():
        by_key.setdefault(r, []).append(ref)
    rows = []
    for r, refs in by_key.items():
        ref = refs[0]
        kind = "npn" if ref == "Q1" else topo.position(ref).kind
        value = b.candidate.npn if kind == "npn" else b.candidate.design.values[ref]
        stock = [{"part_id": s.part_id, "bin": s.bin, "qty": u} for s, u in b.supply.get(r, []) if s.item is None]
        bought = [{"supplier": s.item.supplier, "sku": s.item.sku, "qty": u} for s, u in b.supply.get(r, [])
                  if s.item is not None]
        rows.append({"designators": refs, "kind": kind, "value": value, "from_stock": stock, "bought": bought})
    return rows


def plan_json(p) -> dict:
    builds = []
    for b in p.builds:
        c = b.candidate
        parts = {}
        for row in build_rows(b):
            for ref in row["designators"]:
                parts[ref] = {"kind": row["kind"], "value": row["value"], "from_stock": row["from_stock"],
                              "bought": row["bought"]}
        builds.append({"target": {"freq_hz": b.target.freq_hz, "tol": b.target.tol, "boards": b.target.boards},
                       "topology": c.topology, "npn": c.npn, "parts": parts, "freq_hz": c.freq_hz,
                       "freq_error": c.freq_error, "margin": c.margin, "margin_worst": c.margin_worst})
    purchases = [{"supplier": pc.item.supplier, "sku": pc.item.sku, "kind": pc.item.kind,
                  "value": pc.item.get("name") if pc.item.kind == "npn" else pc.item.get("value"),
                  "packs": pc.packs, "qty": pc.qty, "cost": pc.cost} for pc in p.purchases]
    return {"status": p.status, "builds": builds, "purchases": purchases, "charges": dict(p.charges),
            "total_cost": p.total_cost if p.status != "infeasible" else None,
            "solver": {"gap": p.gap if p.status != "infeasible" else None, "candidate_designs": p.n_options,
                       "per_build": list(p.options_per_build)},
            "stock_after": {str(k): v for k, v in sorted(p.stock_after.items())},
            "reasons": list(p.reasons)}


def csv_rows(p) -> list[list[str]]:
    rows = [list(CSV_COLUMNS)]
    for pc in p.purchases:
        it = pc.item

        def cell(col):
            v = it.get(col)
            return "" if v is None else (f"{v:.6g}" if isinstance(v, float) else str(v))

        rows.append([it.supplier, it.sku, it.kind, cell("value"), cell("tolerance"), cell("voltage_v"), cell("power_w"),
                     cell("dielectric"), cell("dcr_ohm"), cell("name"), str(pc.packs), str(it.pack), str(pc.qty),
                     f"{pc.cost / pc.qty:.4f}", f"{pc.cost:.2f}"])
    return rows


def plan_report(p, targets) -> Group:
    items = [Text("picker reorder: " + "; ".join(_target_text(t) for t in targets), style="bold")]
    if p.status == "infeasible":
        items += [Text(r) for r in p.reasons]
        items.append(Text(f"{p.n_options} candidate designs were considered "
                          f"({' + '.join(str(n) for n in p.options_per_build)})", style="dim"))
        return Group(*items)
    spent = sum(pc.cost for pc in p.purchases)
    charges = sum(p.charges.values())
    gap = "proven optimal" if p.status == "optimal" and p.gap <= 1e-9 else f"at most {p.gap:.2%} above the optimum"
    items.append(Text(f"total {p.total_cost:.2f} (parts {spent:.2f} + order charges {charges:.2f}); {gap}; "
                      f"{p.n_options} candidate designs ({' + '.join(str(n) for n in p.options_per_build)})"))
    if not p.purchases:
        items.append(Text("nothing to buy: the parts on hand cover every build", style="bold green"))
    by_sup: dict = {}
    for pc in p.purchases:
        by_sup.setdefault(pc.item.supplier, []).append(pc)
    for sup, pcs in by_sup.items():
        t = Table(title=f"order from {sup} (order charge {p.charges.get(sup, 0.0):.2f})", title_justify="left")
        for col, j in (("item", "left"), ("kind", "left"), ("value", "right"), ("ratings", "left"),
                       ("packs", "right"), ("qty", "right"), ("cost", "right")):
            t.add_column(col, justify=j)
        for pc in pcs:
            t.add_row(pc.item.sku, pc.item.kind, _item_value(pc.item), _ratings(pc.item),
                      f"{pc.packs} x {pc.item.pack}", str(pc.qty), f"{pc.cost:.2f}")
        items.append(t)
    for k, b in enumerate(p.builds):
        c = b.candidate
        t = Table(title=f"build {k + 1}: {_target_text(b.target)}: {c.topology}, {format_eng(c.freq_hz, 'Hz', digits=5)} "
                        f"({c.freq_error:+.2%}), worst-case margin {c.margin_worst:.2f}", title_justify="left")
        for col, j in (("parts", "left"), ("value", "right"), ("from stock", "left"), ("from the order", "left")):
            t.add_column(col, justify=j)
        for row in build_rows(b):
            stock = ", ".join(f"{s['bin']} x{s['qty']}" for s in row["from_stock"]) or "-"
            bought = ", ".join(f"{s['supplier']} {s['sku']} x{s['qty']}" for s in row["bought"]) or "-"
            t.add_row(" ".join(row["designators"]), _value_text(row["kind"], row["value"], c.npn), stock, bought)
        items.append(t)
    if p.stock_used:
        items.append(Text("stock left after every build: "
                          + ", ".join(f"{s.bin} {_value_text(s.kind, s.value, s.name)} {s.qty}->{s.qty - u}"
                                      for s, u in sorted(p.stock_used, key=lambda su: natural_key(su[0].bin))),
                          style="dim"))
    items.append(Text(CAUTION))
    return Group(*items)

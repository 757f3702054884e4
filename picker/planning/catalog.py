"""Supplier catalogs as plain objects: what can be bought, in what packs, at what price.

The store (``picker.store.catalog``) reads and writes these; the planner
(:mod:`picker.planning.reorder`) only reads them.  Nothing here touches SQL.

Prices are per unit, in the same currency as the stock's ``unit_cost``; a
price break ``(min_qty, unit_price)`` applies to the whole quantity of an
item once at least ``min_qty`` units of it are bought (the usual all-units
break).  Quantities are bought in whole packs of ``pack`` units and at
least ``min_order`` units when the item is bought at all.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

#: Part attributes a catalog item carries (the stock columns without qty, bin, unit_cost, note).
ITEM_FIELDS: tuple[str, ...] = (
    "value", "tolerance", "voltage_v", "power_w", "dielectric", "dcr_ohm", "isat_a", "name",
    "hfe_min", "hfe_max", "vbe_v", "ft_hz", "cob_f", "vaf_v", "vceo_v", "pd_w",
)  # fmt: skip


@dataclass(frozen=True)
class CatalogItem:
    """One purchasable item of one supplier.

    ``attrs`` maps the names in :data:`ITEM_FIELDS` to SI values (None or
    absent when the supplier does not say).  ``breaks`` is ascending in
    ``min_qty``; its first entry's ``min_qty`` is at most ``min_order``.
    """

    supplier: str
    sku: str
    kind: str
    attrs: dict
    pack: int
    min_order: int
    breaks: tuple[tuple[int, float], ...]

    def get(self, name: str):
        return self.attrs.get(name)

    def order_qty(self, need: int) -> int:
        """The smallest whole-pack quantity that covers ``need`` and the minimum order (0 for 0)."""
        if need <= 0:
            return 0
        return self.pack * math.ceil(max(need, self.min_order) / self.pack)

    def unit_price(self, qty: int) -> float:
        """Unit price at a bought quantity (the highest break reached)."""
        price = self.breaks[0][1]
        for q, p in self.breaks:
            if qty >= q:
                price = p
        return price

    def cost(self, qty: int) -> float:
        """Cost of buying exactly ``qty`` units (``qty`` whole packs, at least the minimum)."""
        return 0.0 if qty <= 0 else qty * self.unit_price(qty)


@dataclass(frozen=True)
class Supplier:
    """A supplier: a name, a fixed charge per order placed with it, and its items."""

    name: str
    order_charge: float
    items: tuple[CatalogItem, ...] = field(default_factory=tuple)


@dataclass(frozen=True)
class Purchase:
    """One line of a shopping list: ``packs`` packs (``qty`` units) of ``item`` for ``cost``."""

    item: CatalogItem
    packs: int
    qty: int
    cost: float

"""The search: offers from the drawer, decomposed tank and bias search, refine, rank, yield.

Imports the engine (:mod:`picker.circuit`), never the store.
"""

"""Build jobs: reservations, pick lists, consumption (the store side lives in ``picker.store.builds``)."""

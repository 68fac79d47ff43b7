"""Statistics families, one per module: pure functions on arrays (and one area graph and
seeded streams where needed) returning frozen results with ``to_dict()``.
"""

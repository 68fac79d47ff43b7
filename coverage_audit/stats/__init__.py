"""Statistics families, one per module.

Pure functions on arrays (and one area graph and seeded streams where needed) returning
frozen results with ``to_dict()``.
"""

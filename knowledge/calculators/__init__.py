"""Clinical calculators: one pure function per formula, each with its formula, source key and valid range.

Source keys refer to ids in ``knowledge/data/sources.yaml``.
"""

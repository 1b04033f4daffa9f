"""Presentation in pure Python: the protocol note (``report``), shareable links (``links``), the eGFR
what-if sweep (``whatif``) and the description of the case form (``form``)."""

"""Tonicity: a CDS Hooks 2.0 service over FHIR R4 for the hyponatremia work-up.

Decision support for licensed clinicians; every output is to be checked against the patient
and local protocols and never replaces clinical judgement.
"""

__version__ = "0.1.0"

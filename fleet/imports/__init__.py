"""Import files: reading them (files.py) and the column rules of each kind (columns.py), with no database
access; the checks against the register and the writes are in fleet/services/import_checks.py, the job
(upload, mapping, dry run, import) in fleet/services/import_jobs.py."""

"""The workflow room: one step per product (compute it, write it, once), the job-file schema
and the runner that both the commands and job files use."""

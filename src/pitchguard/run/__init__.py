"""Running a scan: the pipeline over one region, and tiled scans on workers or a cluster."""

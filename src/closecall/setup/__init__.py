"""Study set-up and data: config, init, loading and encoding the files, the demo."""

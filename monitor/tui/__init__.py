"""The textual terminal UI: `monitor.tui.app.run_app(pipeline, args)` owns a live session."""

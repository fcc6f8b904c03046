"""The bundled demo: the main job end to end on the invented Tidepool Logbook scenario (``make demo``)."""

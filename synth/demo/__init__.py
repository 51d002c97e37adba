"""The demo: scenes of our own with known motion (`scenes`) and the demo run (`run`)."""

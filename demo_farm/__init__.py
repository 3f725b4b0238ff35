"""The invented demo farm "Bellbird Rise": its project file and input files (installed as
geosoil.demo_farm; ``make_demo_farm.py`` writes them)."""

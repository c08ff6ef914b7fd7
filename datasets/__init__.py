"""The invented demo data sets, shipped inside the package so an installed bendwise finds them
(``importlib.resources.files("bendwise.datasets")``). ``make_datasets.py`` writes them from fixed
seeds; README.md says what each one pretends to be."""

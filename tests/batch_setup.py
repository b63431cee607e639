"""Shared set-up of the batch tests: a manifest of tiny entries on the small test field."""

from fit_setup import NO_EXTRAS, field_catalogue, tiny_chains, write_testa

# the tiny sampler options every batch test runs with (2 chains x (50 + 50), the fewest allowed)
TINY = tiny_chains(2, 50, 50) + NO_EXTRAS


def write_inputs(folder, names, seed=0, n_stars=30):
    """The small field's satellite file and one 30-star catalogue per name; {name: path}."""
    folder.mkdir(parents=True, exist_ok=True)
    paths = {"satellite": write_testa(folder / "field.toml", "Testa")}
    for i, name in enumerate(names):
        ids = [f"{name}-{k}" for k in range(n_stars)]
        paths[name] = field_catalogue(folder / f"{name}.ecsv", ids, seed + i, 4.0, 1.5)
    return paths


def entry_toml(name, catalogue, satellite="field.toml", **keys):
    """One [[entry]] table (values given as TOML text, e.g. models='["nfw"]')."""
    lines = ["[[entry]]", f'name = "{name}"', f'catalogue = "{catalogue}"']
    lines += [f'satellite = "{satellite}"'] + [f"{k} = {v}" for k, v in keys.items()]
    return "\n".join(lines) + "\n\n"


def write_manifest(path, *tables):
    path.write_text("".join(tables))
    return path

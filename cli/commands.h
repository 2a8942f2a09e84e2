/* The command table: one line per command, kept in the order `nadir --help`
 * lists them. COMMAND(word, function, one-line summary).
 * Adding a command: write cli/cmd_WORD.c defining `int cmd_WORD(int argc,
 * char **argv)` and add its line here. */
COMMAND("build", cmd_build, "3D structures from SMILES, with their stereochemistry, as SD records")
COMMAND("inspect", cmd_inspect, "list the records of a molecule file: formula, atoms, mass, charge")
COMMAND("convert", cmd_convert, "convert molecule files between XYZ, SD and SMILES, keeping data items")
COMMAND("energy", cmd_energy, "energies, forces and ensemble uncertainty of each record under a model")
COMMAND("label", cmd_label, "reference energies and forces from an external program, appended to a dataset")
COMMAND("modes", cmd_modes, "normal modes, imaginary-mode check and repair, and thermochemistry of each record")
COMMAND("optimize", cmd_optimize, "relax every record to a local minimum (L-BFGS or FIRE), with frozen atoms and torsion scans")
COMMAND("conformers", cmd_conformers, "low-energy conformers of each molecule: searched, relaxed, verified minima, ranked")
COMMAND("train", cmd_train, "fit a potential (an ensemble) to the reference energies and forces of a dataset")
COMMAND("evaluate", cmd_evaluate, "errors of a model on a dataset: energies, relative energies, ranks, forces, spread")

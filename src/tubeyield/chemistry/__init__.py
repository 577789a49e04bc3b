"""The reaction network: stoichiometry, formulas and the linear-programming checks."""

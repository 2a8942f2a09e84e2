/* The elements table: symbols, standard atomic weights, isotope masses and
 * covalent radii for H (1) to Xe (54). */
#ifndef ND_ELEMENTS_H
#define ND_ELEMENTS_H

#define ND_MAX_Z 54

/* Atomic number of a symbol ("C", "Cl", case as written: first letter upper,
 * second lower). 0 if the symbol is not in the table. len is the number of
 * characters to read (1 or 2), or -1 for a NUL-terminated string. */
int nd_element_from_symbol(const char *sym, int len);

/* Same, but accepts any letter case ("CL", "cl"), as some XYZ writers produce. */
int nd_element_from_symbol_anycase(const char *sym, int len);

/* Symbol of atomic number z; "?" if z is outside 1..ND_MAX_Z. Static storage. */
const char *nd_element_symbol(int z);

/* Standard atomic weight (IUPAC 2021 abridged/conventional value), in
 * daltons; 0 if z is outside the table. For Tc, which has no stable isotope,
 * the mass of its longest-lived isotope 98Tc (rounded to 98). */
double nd_element_mass(int z);

/* Mass of the isotope with mass number a of element z (AME2020), in daltons;
 * 0 if that isotope is not in the table. a = 0 gives the standard weight. */
double nd_isotope_mass(int z, int a);

/* Single-bond covalent radius (Cordero et al. 2008), in angstrom; 0 if z is
 * outside the table. For C the sp3 value; for Mn, Fe, Co the low-spin value. */
double nd_element_covalent_radius(int z);

#endif

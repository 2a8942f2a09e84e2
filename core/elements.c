/* Element data.
 *
 * Atomic weights: IUPAC/CIAAW standard atomic weights 2021, abridged to the
 * conventional values for elements with an interval (Prohaska et al., Pure
 * Appl. Chem. 94, 573, 2022, Table 2 and 3). Covalent radii: B. Cordero et
 * al., "Covalent radii revisited", Dalton Trans. 2008, 2832 (Table 2).
 * Isotope masses: AME2020 (M. Wang et al., Chinese Phys. C 45, 030003, 2021).
 * The values were typed in from memory of these tables; tests/unit/core
 * checks a sample against the same tables as quoted in the test. */
#include "core/elements.h"

#include <ctype.h>
#include <string.h>

typedef struct {
    const char *symbol;
    double mass;    /* standard atomic weight, Da */
    double radius;  /* covalent radius, angstrom */
} element_row;

static const element_row ELEMENTS[ND_MAX_Z + 1] = {
    {"?", 0.0, 0.0},
    {"H", 1.008, 0.31},        {"He", 4.002602, 0.28},
    {"Li", 6.94, 1.28},        {"Be", 9.0121831, 0.96},   {"B", 10.81, 0.84},
    {"C", 12.011, 0.76},       {"N", 14.007, 0.71},       {"O", 15.999, 0.66},
    {"F", 18.998403162, 0.57}, {"Ne", 20.1797, 0.58},
    {"Na", 22.98976928, 1.66}, {"Mg", 24.305, 1.41},      {"Al", 26.9815384, 1.21},
    {"Si", 28.085, 1.11},      {"P", 30.973761998, 1.07}, {"S", 32.06, 1.05},
    {"Cl", 35.45, 1.02},       {"Ar", 39.95, 1.06},
    {"K", 39.0983, 2.03},      {"Ca", 40.078, 1.76},      {"Sc", 44.955907, 1.70},
    {"Ti", 47.867, 1.60},      {"V", 50.9415, 1.53},      {"Cr", 51.9961, 1.39},
    {"Mn", 54.938043, 1.39},   {"Fe", 55.845, 1.32},      {"Co", 58.933194, 1.26},
    {"Ni", 58.6934, 1.24},     {"Cu", 63.546, 1.32},      {"Zn", 65.38, 1.22},
    {"Ga", 69.723, 1.22},      {"Ge", 72.630, 1.20},      {"As", 74.921595, 1.19},
    {"Se", 78.971, 1.20},      {"Br", 79.904, 1.20},      {"Kr", 83.798, 1.16},
    {"Rb", 85.4678, 2.20},     {"Sr", 87.62, 1.95},       {"Y", 88.905838, 1.90},
    {"Zr", 91.222, 1.75},      {"Nb", 92.90637, 1.64},    {"Mo", 95.95, 1.54},
    {"Tc", 98.0, 1.47},        {"Ru", 101.07, 1.46},      {"Rh", 102.90549, 1.42},
    {"Pd", 106.42, 1.39},      {"Ag", 107.8682, 1.45},    {"Cd", 112.414, 1.44},
    {"In", 114.818, 1.42},     {"Sn", 118.710, 1.39},     {"Sb", 121.760, 1.39},
    {"Te", 127.60, 1.38},      {"I", 126.90447, 1.39},    {"Xe", 131.293, 1.40},
};

typedef struct {
    int z, a;
    double mass;
} isotope_row;

/* AME2020 atomic masses of the isotopes a user may want for mass-weighting
 * (deuteration, 13C/15N labels, heavy-atom isotopologues). */
static const isotope_row ISOTOPES[] = {
    {1, 1, 1.00782503223},  {1, 2, 2.01410177812},  {1, 3, 3.01604928132},
    {6, 12, 12.0},          {6, 13, 13.00335483507},
    {7, 14, 14.00307400443}, {7, 15, 15.00010889888},
    {8, 16, 15.99491461957}, {8, 17, 16.99913175650}, {8, 18, 17.99915961286},
    {9, 19, 18.99840316273},
    {15, 31, 30.97376199842},
    {16, 32, 31.9720711744}, {16, 33, 32.9714589098}, {16, 34, 33.967867004},
    {17, 35, 34.968852682},  {17, 37, 36.965902602},
    {35, 79, 78.9183376},    {35, 81, 80.9162897},
    {53, 127, 126.9044719},
};

int nd_element_from_symbol(const char *sym, int len)
{
    if (!sym)
        return 0;
    if (len < 0)
        len = (int)strlen(sym);
    if (len < 1 || len > 2)
        return 0;
    for (int z = 1; z <= ND_MAX_Z; z++) {
        const char *s = ELEMENTS[z].symbol;
        if ((int)strlen(s) == len && strncmp(s, sym, (size_t)len) == 0)
            return z;
    }
    return 0;
}

int nd_element_from_symbol_anycase(const char *sym, int len)
{
    if (!sym)
        return 0;
    if (len < 0)
        len = (int)strlen(sym);
    if (len < 1 || len > 2)
        return 0;
    char buf[3] = {0, 0, 0};
    buf[0] = (char)toupper((unsigned char)sym[0]);
    if (len == 2)
        buf[1] = (char)tolower((unsigned char)sym[1]);
    return nd_element_from_symbol(buf, len);
}

const char *nd_element_symbol(int z)
{
    return (z >= 1 && z <= ND_MAX_Z) ? ELEMENTS[z].symbol : "?";
}

double nd_element_mass(int z)
{
    return (z >= 1 && z <= ND_MAX_Z) ? ELEMENTS[z].mass : 0.0;
}

double nd_isotope_mass(int z, int a)
{
    if (a == 0)
        return nd_element_mass(z);
    for (size_t i = 0; i < sizeof ISOTOPES / sizeof ISOTOPES[0]; i++)
        if (ISOTOPES[i].z == z && ISOTOPES[i].a == a)
            return ISOTOPES[i].mass;
    return 0.0;
}

double nd_element_covalent_radius(int z)
{
    return (z >= 1 && z <= ND_MAX_Z) ? ELEMENTS[z].radius : 0.0;
}

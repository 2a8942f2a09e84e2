/* Models: construction from a spec, accessors, domain checks and the model
 * file (format in model.h). */
#include "potential/model.h"
#include "core/numeric.h"

#include "core/elements.h"
#include "core/readfile.h"
#include "core/report.h"
#include "core/rng.h"
#include "potential/descriptor_json.h"
#include "potential/network.h"

#include <cjson/cJSON.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>

#define MAGIC "nadir-model "
#define TRAILER_FMT "\nchecksum fnv1a64 %016llx\n"
#define TRAILER_LEN 35 /* strlen("\nchecksum fnv1a64 ") + 16 + 1 */

uint64_t nd_model_fnv1a64(uint64_t h, const void *data, size_t n)
{
    const unsigned char *p = data;
    for (size_t i = 0; i < n; i++) {
        h ^= p[i];
        h *= UINT64_C(0x100000001b3);
    }
    return h;
}

void nd_model_spec_defaults(nd_model_spec *s)
{
    memset(s, 0, sizeof *s);
    static const int z[7] = {1, 6, 7, 8, 9, 16, 17};
    s->nelements = 7;
    memcpy(s->z, z, sizeof z);
    nd_descriptor_defaults(&s->descriptor);
    s->nhidden = 2;
    s->hidden[0] = 96;
    s->hidden[1] = 64;
    s->members = 4;
    s->neutral_only = 1;
}

/* An empty model shell with elements, descriptor and architecture checked
 * and the parameter vector allocated (zeroed). */
static int model_shell(nd_model **out, int nel, const int *z, const nd_descriptor_params *desc,
                       int nhidden, const int *hidden, int members, int neutral_only,
                       nd_error *err)
{
    *out = NULL;
    if (nel < 1 || nel > ND_MODEL_MAX_ELEMENTS)
        return nd_fail(err, ND_EINPUT, "model: %d elements, expected 1 to %d", nel,
                       ND_MODEL_MAX_ELEMENTS);
    if (nhidden < 1 || nhidden > ND_NET_MAX_HIDDEN)
        return nd_fail(err, ND_EINPUT, "model: %d hidden layers, expected 1 to %d", nhidden,
                       ND_NET_MAX_HIDDEN);
    if (members < 1 || members > ND_MODEL_MAX_MEMBERS)
        return nd_fail(err, ND_EINPUT, "model: %d ensemble members, expected 1 to %d", members,
                       ND_MODEL_MAX_MEMBERS);
    for (int l = 0; l < nhidden; l++)
        if (hidden[l] < 1 || hidden[l] > ND_NET_MAX_WIDTH)
            return nd_fail(err, ND_EINPUT, "model: hidden layer %d has width %d, expected 1 to %d",
                           l + 1, hidden[l], ND_NET_MAX_WIDTH);
    int s = nd_descriptor_check(desc, err);
    if (s)
        return s;
    nd_model *m = calloc(1, sizeof *m);
    if (!m)
        return nd_fail(err, ND_ENOMEM, "model: out of memory");
    m->nel = nel;
    for (int i = 0; i < nel; i++)
        m->z[i] = z[i];
    /* ascending atomic numbers */
    for (int i = 1; i < nel; i++)
        for (int j = i; j > 0 && m->z[j - 1] > m->z[j]; j--) {
            int t = m->z[j];
            m->z[j] = m->z[j - 1];
            m->z[j - 1] = t;
        }
    for (int i = 0; i <= ND_MAX_Z; i++)
        m->slot_of_z[i] = -1;
    for (int i = 0; i < nel; i++) {
        int zi = m->z[i];
        if (zi < 1 || zi > ND_MAX_Z) {
            free(m);
            return nd_fail(err, ND_EINPUT, "model: atomic number %d is not an element", zi);
        }
        if (i > 0 && zi == m->z[i - 1]) {
            free(m);
            return nd_fail(err, ND_EINPUT, "model: element %s listed twice", nd_element_symbol(zi));
        }
        m->slot_of_z[m->z[i]] = i;
    }
    m->desc = *desc;
    m->nhidden = nhidden;
    for (int l = 0; l < nhidden; l++)
        m->width[l + 1] = hidden[l];
    m->nmembers = members;
    m->neutral_only = neutral_only ? 1 : 0;
    nd_net_layout(m);
    m->params = calloc(m->nparams ? m->nparams : 1, sizeof(double));
    m->provenance = malloc(3);
    if (!m->params || !m->provenance) {
        nd_model_free(m);
        return nd_fail(err, ND_ENOMEM, "model: out of memory for %zu parameters", m->nparams);
    }
    strcpy(m->provenance, "{}");
    nd_net_bind(m);
    *out = m;
    return ND_OK;
}

int nd_model_new(nd_model **out, const nd_model_spec *spec, uint64_t seed, nd_error *err)
{
    nd_model *m;
    int s = model_shell(&m, spec->nelements, spec->z, &spec->descriptor, spec->nhidden,
                        spec->hidden, spec->members, spec->neutral_only, err);
    if (s) {
        *out = NULL;
        return s;
    }
    for (int f = 0; f < m->nel * m->D; f++)
        m->scale[f] = 1;
    for (int k = 0; k < m->nmembers; k++) {
        nd_rng rng;
        nd_rng_stream(&rng, seed, (uint64_t)k);
        for (int e = 0; e < m->nel; e++)
            for (int l = 1; l <= m->nhidden + 1; l++) {
                int fan = m->width[l - 1];
                double sd = 1 / sqrt((double)fan) * (l == m->nhidden + 1 ? 0.1 : 1.0);
                double *w = nd_net_weights(m, e, l, k), *b = nd_net_bias(m, e, l, k);
                for (int i = 0; i < m->width[l] * fan; i++)
                    w[i] = sd * nd_rng_normal(&rng);
                for (int i = 0; i < m->width[l]; i++)
                    b[i] = l == m->nhidden + 1 ? 0 : 0.1 * nd_rng_normal(&rng);
            }
    }
    char prov[128];
    snprintf(prov, sizeof prov, "{\"origin\":\"random weights\",\"seed\":%llu}",
             (unsigned long long)seed);
    s = nd_model_set_provenance(m, prov, err);
    if (s) {
        nd_model_free(m);
        *out = NULL;
        return s;
    }
    *out = m;
    return ND_OK;
}

void nd_model_free(nd_model *m)
{
    if (!m)
        return;
    free(m->params);
    free(m->provenance);
    free(m);
}

int nd_model_copy(nd_model **out, const nd_model *m, nd_error *err)
{
    *out = NULL;
    nd_model *c = malloc(sizeof *c);
    if (!c)
        return nd_fail(err, ND_ENOMEM, "model: out of memory");
    *c = *m;
    c->params = malloc(m->nparams * sizeof(double) + 1);
    c->provenance = strdup(m->provenance);
    if (!c->params || !c->provenance) {
        nd_model_free(c);
        return nd_fail(err, ND_ENOMEM, "model: out of memory");
    }
    memcpy(c->params, m->params, m->nparams * sizeof(double));
    nd_net_bind(c);
    *out = c;
    return ND_OK;
}

int nd_model_elements(const nd_model *m, const int **z)
{
    if (z)
        *z = m->z;
    return m->nel;
}

double nd_model_cutoff(const nd_model *m)
{
    return nd_larger(m->desc.radial_cutoff, m->desc.nangular ? m->desc.angular_cutoff : 0);
}

int nd_model_members(const nd_model *m) { return m->nmembers; }
int nd_model_features(const nd_model *m) { return m->D; }
int nd_model_neutral_only(const nd_model *m) { return m->neutral_only; }
const nd_descriptor_params *nd_model_descriptor(const nd_model *m) { return &m->desc; }
size_t nd_model_parameter_count(const nd_model *m) { return m->nparams; }
const char *nd_model_provenance(const nd_model *m) { return m->provenance; }

int nd_model_set_provenance(nd_model *m, const char *json, nd_error *err)
{
    cJSON *j = cJSON_Parse(json);
    if (!j || !cJSON_IsObject(j)) {
        cJSON_Delete(j);
        return nd_fail(err, ND_EINPUT, "model provenance: not a JSON object");
    }
    char *txt = cJSON_PrintUnformatted(j);
    cJSON_Delete(j);
    if (!txt)
        return nd_fail(err, ND_ENOMEM, "model provenance: out of memory");
    free(m->provenance);
    m->provenance = txt;
    return ND_OK;
}

void nd_model_domain(const nd_model *m, char *buf, int size)
{
    int k = 0;
    if (size <= 0)
        return;
    buf[0] = '\0';
    for (int i = 0; i < m->nel && k < size; i++)
        k += snprintf(buf + k, (size_t)(size - k), "%s%s", i ? ", " : "", nd_element_symbol(m->z[i]));
    if (k < size)
        snprintf(buf + k, (size_t)(size - k), "%s",
                 m->neutral_only ? "; neutral molecules only" : "; any charge");
}

int nd_model_check_atoms(const nd_model *m, int n, const int *z, int charge, nd_error *err)
{
    char dom[160];
    for (int i = 0; i < n; i++)
        if (z[i] < 1 || z[i] > ND_MAX_Z || m->slot_of_z[z[i]] < 0) {
            nd_model_domain(m, dom, sizeof dom);
            return nd_fail(err, ND_EDOMAIN,
                           "atom %d (%s): element not covered by the model (model domain: %s)", i + 1,
                           nd_element_symbol(z[i]), dom);
        }
    if (m->neutral_only && charge != 0) {
        nd_model_domain(m, dom, sizeof dom);
        return nd_fail(err, ND_EDOMAIN,
                       "molecule has total charge %+d: outside the model's domain (%s)", charge, dom);
    }
    return ND_OK;
}

int nd_model_check(const nd_model *m, const nd_molecule *mol, nd_error *err)
{
    int charge = mol->charge;
    if (charge == 0 && mol->formal_charge)
        charge = nd_molecule_formal_charge_sum(mol);
    int s = nd_model_check_atoms(m, mol->natoms, mol->z, charge, err);
    if (s != ND_OK || !m->neutral_only)
        return s;
    /* a neutral model learned closed-shell molecules: an odd electron count
     * is a radical or an ion whose charge the file does not state (XYZ
     * holds none), and its energy would be a confident-looking guess */
    long electrons = nd_molecule_electrons(mol, charge);
    char dom[160];
    if (electrons % 2 != 0 || mol->multiplicity > 1) {
        nd_model_domain(m, dom, sizeof dom);
        if (electrons % 2 != 0)
            return nd_fail(err, ND_EDOMAIN,
                           "molecule has %ld electrons, an odd number: a radical, or an ion whose "
                           "charge the input does not state (XYZ files hold none; give an SD file "
                           "with the charges); outside the model's domain (%s, closed-shell)",
                           electrons, dom);
        return nd_fail(err, ND_EDOMAIN,
                       "molecule has spin multiplicity %d: outside the model's domain (%s, "
                       "closed-shell)", mol->multiplicity, dom);
    }
    return ND_OK;
}

/* ---------------------------------------------------------------- files */

/* Little-endian bytes of a double and back (exact bit patterns). */
static void put_le(unsigned char *p, double v)
{
    uint64_t u;
    memcpy(&u, &v, 8);
    for (int i = 0; i < 8; i++)
        p[i] = (unsigned char)(u >> (8 * i));
}
static double get_le(const unsigned char *p)
{
    uint64_t u = 0;
    for (int i = 0; i < 8; i++)
        u |= (uint64_t)p[i] << (8 * i);
    double v;
    memcpy(&v, &u, 8);
    return v;
}

/* The header object of m; NULL when out of memory. */
static cJSON *header_json(const nd_model *m)
{
    cJSON *h = cJSON_CreateObject();
    cJSON_AddStringToObject(h, "format", "nadir model");
    cJSON_AddNumberToObject(h, "version", ND_MODEL_FORMAT_VERSION);
    cJSON *el = cJSON_AddArrayToObject(h, "elements");
    for (int i = 0; i < m->nel; i++)
        cJSON_AddItemToArray(el, cJSON_CreateString(nd_element_symbol(m->z[i])));
    cJSON_AddBoolToObject(h, "neutral_only", m->neutral_only);
    cJSON *d = cJSON_AddObjectToObject(h, "descriptor");
    cJSON_AddStringToObject(d, "kind", "Behler-Parrinello symmetry functions");
    cJSON_AddStringToObject(d, "cutoff_function", "(1-t)^3 (1+3t+6t^2), t = r/cutoff");
    nd_descriptor_json_add(d, &m->desc);
    cJSON_AddNumberToObject(d, "features", m->D);
    cJSON *nw = cJSON_AddObjectToObject(h, "network");
    cJSON *hid = cJSON_AddArrayToObject(nw, "hidden");
    for (int l = 1; l <= m->nhidden; l++)
        cJSON_AddItemToArray(hid, cJSON_CreateNumber(m->width[l]));
    cJSON_AddStringToObject(nw, "activation", "silu");
    cJSON_AddNumberToObject(nw, "members", m->nmembers);
    cJSON *w = cJSON_AddObjectToObject(h, "weights");
    cJSON_AddNumberToObject(w, "count", (double)m->nparams);
    cJSON_AddStringToObject(w, "encoding", "IEEE-754 binary64, little-endian");
    cJSON_AddStringToObject(w, "order",
                            "mu[element][feature], scale[element][feature], offset[element], then "
                            "per element, per layer: W[member][out][in], b[member][out]");
    cJSON *p = cJSON_Parse(m->provenance);
    cJSON_AddItemToObject(h, "provenance", p ? p : cJSON_CreateObject());
    return h;
}

int nd_model_save(const nd_model *m, const char *path, nd_error *err)
{
    cJSON *h = header_json(m);
    char *txt = h ? cJSON_Print(h) : NULL;
    cJSON_Delete(h);
    if (!txt)
        return nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
    char head[32];
    snprintf(head, sizeof head, MAGIC "%d\n", ND_MODEL_FORMAT_VERSION);
    size_t lh = strlen(head), lt = strlen(txt), lw = m->nparams * 8;
    size_t total = lh + lt + 1 + lw;
    unsigned char *buf = malloc(total + TRAILER_LEN + 1);
    if (!buf) {
        free(txt);
        return nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
    }
    memcpy(buf, head, lh);
    memcpy(buf + lh, txt, lt);
    buf[lh + lt] = '\n';
    free(txt);
    for (size_t i = 0; i < m->nparams; i++)
        put_le(buf + lh + lt + 1 + 8 * i, m->params[i]);
    uint64_t sum = nd_model_fnv1a64(ND_FNV1A64_INIT, buf, total);
    snprintf((char *)buf + total, TRAILER_LEN + 1, TRAILER_FMT, (unsigned long long)sum);
    total += TRAILER_LEN;

    size_t lp = strlen(path);
    char *tmp = malloc(lp + 16);
    if (!tmp) {
        free(buf);
        return nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
    }
    snprintf(tmp, lp + 16, "%s.tmpXXXXXX", path);
    int fd = mkstemp(tmp);
    if (fd < 0) {
        int e = errno;
        free(buf);
        free(tmp);
        return nd_fail(err, ND_EIO, "%s: cannot create a temporary file: %s", path, strerror(e));
    }
    (void)fchmod(fd, 0644); /* mkstemp makes 0600; a model is meant to be shared */
    size_t done = 0;
    while (done < total) {
        ssize_t w = write(fd, buf + done, total - done);
        if (w <= 0)
            break;
        done += (size_t)w;
    }
    int bad = done != total;
    int e = errno;
    if (close(fd) != 0 && !bad) {
        bad = 1;
        e = errno;
    }
    free(buf);
    if (!bad && rename(tmp, path) != 0) {
        bad = 1;
        e = errno;
    }
    if (bad) {
        unlink(tmp);
        free(tmp);
        return nd_fail(err, ND_EIO, "%s: cannot write the model file: %s", path, strerror(e));
    }
    free(tmp);
    return ND_OK;
}

/* Number field key of object o as a double, or ND_EINPUT naming it. */
static int get_num(const char *path, const cJSON *o, const char *key, double *v, nd_error *err)
{
    const cJSON *j = cJSON_GetObjectItemCaseSensitive(o, key);
    if (!cJSON_IsNumber(j))
        return nd_fail(err, ND_EINPUT, "%s: model header lacks the number \"%s\"", path, key);
    *v = j->valuedouble;
    return ND_OK;
}

/* Integer field (a number with no fractional part, within int range). */
static int get_int(const char *path, const cJSON *o, const char *key, int *v, nd_error *err)
{
    double d = 0;
    int s = get_num(path, o, key, &d, err);
    if (s)
        return s;
    if (!(d == floor(d) && fabs(d) < 2e9))
        return nd_fail(err, ND_EINPUT, "%s: model header field \"%s\" = %g is not an integer",
                       path, key, d);
    *v = (int)d;
    return ND_OK;
}

/* Parses the header object into a model shell; the weights follow later. */
static int parse_header(const char *path, const cJSON *h, nd_model **out, size_t *count,
                        nd_error *err)
{
    int s, v;
    const cJSON *fmt = cJSON_GetObjectItemCaseSensitive(h, "format");
    if (!cJSON_IsString(fmt) || strcmp(fmt->valuestring, "nadir model") != 0)
        return nd_fail(err, ND_EINPUT, "%s: header \"format\" is not \"nadir model\"", path);
    if ((s = get_int(path, h, "version", &v, err)))
        return s;
    if (v != ND_MODEL_FORMAT_VERSION)
        return nd_fail(err, ND_EINPUT, "%s: header says format version %d, this nadir reads version %d",
                       path, v, ND_MODEL_FORMAT_VERSION);
    const cJSON *el = cJSON_GetObjectItemCaseSensitive(h, "elements");
    int nel = cJSON_GetArraySize(el);
    if (!cJSON_IsArray(el) || nel < 1 || nel > ND_MODEL_MAX_ELEMENTS)
        return nd_fail(err, ND_EINPUT, "%s: header \"elements\" must list 1 to %d element symbols",
                       path, ND_MODEL_MAX_ELEMENTS);
    int z[ND_MODEL_MAX_ELEMENTS];
    for (int i = 0; i < nel; i++) {
        const cJSON *e = cJSON_GetArrayItem(el, i);
        z[i] = cJSON_IsString(e) ? nd_element_from_symbol(e->valuestring, -1) : 0;
        if (!z[i])
            return nd_fail(err, ND_EINPUT, "%s: header \"elements\" entry %d is not an element symbol",
                           path, i + 1);
        if (i > 0 && z[i] <= z[i - 1])
            return nd_fail(err, ND_EINPUT, "%s: header \"elements\" must be in ascending atomic number",
                           path);
    }
    const cJSON *neu = cJSON_GetObjectItemCaseSensitive(h, "neutral_only");
    if (!cJSON_IsBool(neu))
        return nd_fail(err, ND_EINPUT, "%s: header lacks the true/false \"neutral_only\"", path);
    const cJSON *d = cJSON_GetObjectItemCaseSensitive(h, "descriptor");
    if (!cJSON_IsObject(d))
        return nd_fail(err, ND_EINPUT, "%s: header lacks the \"descriptor\" object", path);
    nd_descriptor_params dp;
    char where[600];
    snprintf(where, sizeof where, "%.500s: model header descriptor", path);
    if ((s = nd_descriptor_json_read(d, where, &dp, err)))
        return s;
    const cJSON *nw = cJSON_GetObjectItemCaseSensitive(h, "network");
    if (!cJSON_IsObject(nw))
        return nd_fail(err, ND_EINPUT, "%s: header lacks the \"network\" object", path);
    const cJSON *act = cJSON_GetObjectItemCaseSensitive(nw, "activation");
    if (!cJSON_IsString(act) || strcmp(act->valuestring, "silu") != 0)
        return nd_fail(err, ND_EINPUT, "%s: network activation must be \"silu\"", path);
    const cJSON *hid = cJSON_GetObjectItemCaseSensitive(nw, "hidden");
    int nh = cJSON_GetArraySize(hid);
    if (!cJSON_IsArray(hid) || nh < 1 || nh > ND_NET_MAX_HIDDEN)
        return nd_fail(err, ND_EINPUT, "%s: network \"hidden\" must list 1 to %d widths", path,
                       ND_NET_MAX_HIDDEN);
    int hw[ND_NET_MAX_HIDDEN];
    for (int l = 0; l < nh; l++) {
        const cJSON *x = cJSON_GetArrayItem(hid, l);
        if (!cJSON_IsNumber(x) || x->valuedouble != floor(x->valuedouble) || x->valuedouble < 1 ||
            x->valuedouble > ND_NET_MAX_WIDTH)
            return nd_fail(err, ND_EINPUT, "%s: network hidden width %d is not valid", path, l + 1);
        hw[l] = (int)x->valuedouble;
    }
    int members;
    if ((s = get_int(path, nw, "members", &members, err)))
        return s;
    const cJSON *w = cJSON_GetObjectItemCaseSensitive(h, "weights");
    double cnt = 0;
    if (!cJSON_IsObject(w) || (s = get_num(path, w, "count", &cnt, err)))
        return cJSON_IsObject(w) ? s
                                 : nd_fail(err, ND_EINPUT, "%s: header lacks the \"weights\" object", path);
    nd_model *m;
    s = model_shell(&m, nel, z, &dp, nh, hw, members, cJSON_IsTrue(neu), err);
    if (s) {
        nd_error_prefix(err, "%s", path);
        return s;
    }
    if (cnt != (double)m->nparams) {
        size_t need = m->nparams;
        nd_model_free(m);
        return nd_fail(err, ND_EINPUT,
                       "%s: header says %.0f weights but its architecture needs %zu", path, cnt,
                       need);
    }
    const cJSON *prov = cJSON_GetObjectItemCaseSensitive(h, "provenance");
    if (cJSON_IsObject(prov)) {
        char *txt = cJSON_PrintUnformatted(prov);
        if (!txt) {
            nd_model_free(m);
            return nd_fail(err, ND_ENOMEM, "%s: out of memory", path);
        }
        free(m->provenance);
        m->provenance = txt;
    }
    *count = m->nparams;
    *out = m;
    return ND_OK;
}

int nd_model_load(const char *path, nd_model **out, nd_error *err)
{
    *out = NULL;
    unsigned char *buf = NULL;
    size_t len = 0;
    int s = nd_read_file(path, "model file", 0, &buf, &len, err);
    if (s)
        return s;
    size_t lm = strlen(MAGIC);
    if (len < lm || memcmp(buf, MAGIC, lm) != 0) {
        free(buf);
        return nd_fail(err, ND_EINPUT, "%s: not a nadir model file (it does not begin with \"%s\")",
                       path, MAGIC "N");
    }
    char *endv;
    long ver = strtol((char *)buf + lm, &endv, 10);
    if (endv == (char *)buf + lm || *endv != '\n') {
        free(buf);
        return nd_fail(err, ND_EINPUT, "%s: damaged first line (expected \"%sN\")", path, MAGIC);
    }
    if (ver != ND_MODEL_FORMAT_VERSION) {
        free(buf);
        return nd_fail(err, ND_EINPUT,
                       "%s: model file format version %ld; this nadir reads version %d only", path,
                       ver, ND_MODEL_FORMAT_VERSION);
    }
    size_t hstart = (size_t)(endv + 1 - (char *)buf);
    /* trailer: "\nchecksum fnv1a64 " + 16 hex + "\n" */
    const char *tag = "\nchecksum fnv1a64 ";
    size_t ltag = strlen(tag);
    if (len < hstart + TRAILER_LEN || memcmp(buf + len - TRAILER_LEN, tag, ltag) != 0 ||
        buf[len - 1] != '\n') {
        free(buf);
        return nd_fail(err, ND_EINPUT,
                       "%s: truncated or damaged model file (no checksum line at its end)", path);
    }
    char hex[17];
    memcpy(hex, buf + len - TRAILER_LEN + ltag, 16);
    hex[16] = 0;
    char *eh;
    unsigned long long want = strtoull(hex, &eh, 16);
    uint64_t got = nd_model_fnv1a64(ND_FNV1A64_INIT, buf, len - TRAILER_LEN);
    if (*eh != 0 || want != got) {
        free(buf);
        return nd_fail(err, ND_EINPUT,
                       "%s: checksum mismatch (file says %s, content gives %016llx): the model file "
                       "is damaged or was edited",
                       path, hex, (unsigned long long)got);
    }
    const char *jend = NULL;
    cJSON *h = cJSON_ParseWithLengthOpts((const char *)buf + hstart, len - TRAILER_LEN - hstart,
                                         &jend, 0);
    if (!h || !cJSON_IsObject(h)) {
        cJSON_Delete(h);
        free(buf);
        return nd_fail(err, ND_EINPUT, "%s: the model header is not a JSON object", path);
    }
    size_t count = 0;
    nd_model *m = NULL;
    s = parse_header(path, h, &m, &count, err);
    cJSON_Delete(h);
    if (s) {
        free(buf);
        return s;
    }
    size_t wstart = (size_t)(jend - (const char *)buf);
    if (wstart >= len || buf[wstart] != '\n') {
        free(buf);
        nd_model_free(m);
        return nd_fail(err, ND_EINPUT, "%s: no line break after the model header", path);
    }
    wstart++;
    size_t have = len - TRAILER_LEN - wstart;
    if (have != 8 * count) {
        free(buf);
        nd_model_free(m);
        return nd_fail(err, ND_EINPUT, "%s: %zu bytes of weights, the header needs %zu (%zu doubles)",
                       path, have, 8 * count, count);
    }
    for (size_t i = 0; i < count; i++) {
        double v = get_le(buf + wstart + 8 * i);
        if (!isfinite(v)) {
            free(buf);
            nd_model_free(m);
            return nd_fail(err, ND_EINPUT, "%s: weight %zu is not finite", path, i + 1);
        }
        m->params[i] = v;
    }
    free(buf);
    *out = m;
    return ND_OK;
}

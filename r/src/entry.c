/* Registration of the package's .Call entry points, which are defined in
 * Rust (r/src/rust/src/lib.rs) and linked in as a static library. */
#include <R.h>
#include <Rinternals.h>
#include <R_ext/Rdynload.h>

SEXP morbus_r_score(SEXP, SEXP, SEXP, SEXP);
SEXP morbus_r_explain(SEXP, SEXP, SEXP, SEXP);
SEXP morbus_r_lists(SEXP);
SEXP morbus_r_version(void);
SEXP morbus_r_debug_build(void);

static const R_CallMethodDef calls[] = {
    {"morbus_r_score", (DL_FUNC) &morbus_r_score, 4},
    {"morbus_r_explain", (DL_FUNC) &morbus_r_explain, 4},
    {"morbus_r_lists", (DL_FUNC) &morbus_r_lists, 1},
    {"morbus_r_version", (DL_FUNC) &morbus_r_version, 0},
    {"morbus_r_debug_build", (DL_FUNC) &morbus_r_debug_build, 0},
    {NULL, NULL, 0}
};

void R_init_morbus(DllInfo *dll) {
    R_registerRoutines(dll, NULL, calls, NULL, NULL);
    R_useDynamicSymbols(dll, FALSE);
}

#ifndef STOPGAP_CVREF_H
#define STOPGAP_CVREF_H
#ifdef __cplusplus
extern "C" {
#endif
/* Returns 0 on success, -1 if OpenCV threw. */
int cvref_project_points(const double *pts, int n, const double *r, const double *t,
                         const double *k, const double *dist, double *out);
#ifdef __cplusplus
}
#endif
#endif

#ifndef STOPGAP_CVREF_H
#define STOPGAP_CVREF_H
#ifdef __cplusplus
extern "C" {
#endif

// cvref_project_points wraps cv::projectPoints. obj holds n*3 doubles, out
// receives n*2 doubles. Returns 0 on success, -1 if OpenCV threw.
int cvref_project_points(const double* obj, int n, const double* rvec, const double* tvec,
                         const double* k33, const double* dist5, double* out);

// cvref_rodrigues wraps cv::Rodrigues (3x3 rotation matrix, row-major -> rotation vector).
int cvref_rodrigues(const double* r33, double* rvec3);

// cvref_set_num_threads wraps cv::setNumThreads and returns the previous cv::getNumThreads().
int cvref_set_num_threads(int n);

// cvref_get_num_threads wraps cv::getNumThreads.
int cvref_get_num_threads(void);

#ifdef __cplusplus
}
#endif
#endif

#include "cvref.h"
#include <opencv2/core.hpp>
#include <opencv2/calib3d.hpp>
#include <vector>

extern "C" int cvref_project_points(const double* obj, int n, const double* rvec, const double* tvec,
                                    const double* k33, const double* dist5, double* out) {
    try {
        std::vector<cv::Point3d> pts(n);
        for (int i = 0; i < n; i++) pts[i] = cv::Point3d(obj[3*i], obj[3*i+1], obj[3*i+2]);
        cv::Mat rv(3, 1, CV_64F, const_cast<double*>(rvec));
        cv::Mat tv(3, 1, CV_64F, const_cast<double*>(tvec));
        cv::Mat k(3, 3, CV_64F, const_cast<double*>(k33));
        cv::Mat d(1, 5, CV_64F, const_cast<double*>(dist5));
        std::vector<cv::Point2d> img;
        cv::projectPoints(pts, rv, tv, k, d, img);
        for (int i = 0; i < n; i++) { out[2*i] = img[i].x; out[2*i+1] = img[i].y; }
        return 0;
    } catch (...) {
        return -1;
    }
}

extern "C" int cvref_rodrigues(const double* r33, double* rvec3) {
    try {
        cv::Mat r(3, 3, CV_64F, const_cast<double*>(r33));
        cv::Mat v;
        cv::Rodrigues(r, v);
        for (int i = 0; i < 3; i++) rvec3[i] = v.at<double>(i);
        return 0;
    } catch (...) {
        return -1;
    }
}

extern "C" int cvref_set_num_threads(int n) {
    int prev = cv::getNumThreads();
    cv::setNumThreads(n);
    return prev;
}

extern "C" int cvref_get_num_threads(void) { return cv::getNumThreads(); }

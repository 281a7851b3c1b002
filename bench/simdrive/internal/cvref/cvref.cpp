#include <opencv2/core.hpp>
#include <opencv2/calib3d.hpp>
#include <vector>
#include "cvref.h"

int cvref_project_points(const double *pts, int n, const double *r, const double *t,
                         const double *k, const double *dist, double *out) {
    try {
        std::vector<cv::Point3d> obj(n);
        for (int i = 0; i < n; i++) obj[i] = cv::Point3d(pts[3 * i], pts[3 * i + 1], pts[3 * i + 2]);
        cv::Mat R(3, 3, CV_64F);
        for (int i = 0; i < 9; i++) R.at<double>(i / 3, i % 3) = r[i];
        cv::Mat rvec;
        cv::Rodrigues(R, rvec);
        cv::Mat tvec = (cv::Mat_<double>(3, 1) << t[0], t[1], t[2]);
        cv::Mat K = (cv::Mat_<double>(3, 3) << k[0], 0, k[2], 0, k[1], k[3], 0, 0, 1);
        cv::Mat D = (cv::Mat_<double>(1, 5) << dist[0], dist[1], dist[2], dist[3], dist[4]);
        std::vector<cv::Point2d> img;
        cv::projectPoints(obj, rvec, tvec, K, D, img);
        for (int i = 0; i < n; i++) {
            out[2 * i] = img[i].x;
            out[2 * i + 1] = img[i].y;
        }
        return 0;
    } catch (...) {
        return -1;
    }
}

// Regenerates the OpenCV-written fixtures of this directory from the
// calibration sample's output shipped by Debian's opencv-doc:
//
//   g++ -O1 -o /tmp/opencv_convert opencv_convert.cpp $(pkg-config --cflags --libs opencv4)
//   /tmp/opencv_convert /usr/share/doc/opencv-doc/examples/data/left_intrinsics.yml left_intrinsics.xml
//
// It reads the YAML with cv::FileStorage and writes the same nodes as XML
// (cv::FileStorage picks the format from the file extension), so the XML
// layout is OpenCV's own, not ours.
#include <opencv2/core.hpp>
#include <iostream>

int main(int argc, char** argv) {
    if (argc != 3) { std::cerr << "usage: opencv_convert IN.yml OUT.xml\n"; return 2; }
    cv::FileStorage in(argv[1], cv::FileStorage::READ);
    cv::FileStorage out(argv[2], cv::FileStorage::WRITE);
    int w = 0, h = 0;
    in["image_width"] >> w;
    in["image_height"] >> h;
    cv::Mat k, d;
    in["camera_matrix"] >> k;
    in["distortion_coefficients"] >> d;
    out << "image_width" << w << "image_height" << h;
    out << "camera_matrix" << k << "distortion_coefficients" << d;
    return 0;
}

// gyre::gyre is the training library as one target: it links every module (see
// src/CMakeLists.txt). This translation unit only anchors the archive.
#include "gyre/core/version.hpp"

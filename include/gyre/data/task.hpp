#pragma once
// The two kinds of model gyre trains, decided by the corpus format: kClassify (a label per text)
// and kTag (a tag per token). The enum is the runtime's (one set of enums for the library and the
// model file, gyre/runtime/model_header.hpp); to_string(Task) gives "classify" / "tag".

#include "gyre/runtime/model_header.hpp"

namespace gyre::data {

using Task = runtime::Task;
using runtime::to_string;

}  // namespace gyre::data

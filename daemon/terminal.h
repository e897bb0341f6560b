// Terminal output: whether to colour, and alert lines in colour. A line is
// coloured only when its stream is a terminal and NO_COLOR is unset or empty
// (the convention of no-color.org; from memory). Thread-safe.
#pragma once

#include <cstdio>
#include <string>

#include "daemon/engine.h"

namespace plumbline {

// True when `stream` is a terminal and NO_COLOR does not ask for plain text.
bool WantsColour(std::FILE* stream);

// AlertToText(alert) with ANSI colours: the time dim, the kind in a colour of
// its own (level red, variance magenta, rate yellow, silence blue; an
// expected alert and the other events dim), the series bold. Without colour
// the text is AlertToText's, byte for byte.
std::string AlertLine(const Alert& alert, bool colour);

}  // namespace plumbline

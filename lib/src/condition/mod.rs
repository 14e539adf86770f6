//! Frame conditioning: dark subtraction, co-adding, bad pixels, saturation, gain, integration time.

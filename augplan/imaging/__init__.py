"""Image arrays: sRGB colour maths and the checks every image function relies on."""

# Writes OUT, a C++ file defining `extern const char NAME[]` with the bytes of IN.
# Usage: cmake -DIN=file -DOUT=file.cc -DNAME=kName -DNS=namespace -P embed_file.cmake
file(READ "${IN}" content HEX)
string(REGEX REPLACE "([0-9a-f][0-9a-f])" "'\\\\x\\1'," bytes "${content}")
file(WRITE "${OUT}" "// Generated from ${IN} by embed_file.cmake; do not edit.\nnamespace ${NS} {\nextern const char ${NAME}[];\nconst char ${NAME}[] = {${bytes} 0};\n}  // namespace ${NS}\n")

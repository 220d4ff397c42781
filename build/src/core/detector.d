build/src/core/detector.o: src/core/detector.c src/core/internal.h \
 src/core/quadwatch.h
src/core/internal.h:
src/core/quadwatch.h:

build/src/core/ewcov.o: src/core/ewcov.c src/core/internal.h \
 src/core/quadwatch.h
src/core/internal.h:
src/core/quadwatch.h:

build/src/core/explain.o: src/core/explain.c src/core/internal.h \
 src/core/quadwatch.h
src/core/internal.h:
src/core/quadwatch.h:

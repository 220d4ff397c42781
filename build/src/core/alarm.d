build/src/core/alarm.o: src/core/alarm.c src/core/quadwatch.h
src/core/quadwatch.h:

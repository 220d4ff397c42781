build/src/cmd/main.o: src/cmd/main.c src/cmd/cmd.h
src/cmd/cmd.h:

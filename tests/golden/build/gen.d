gen/beep.bin: ladderpack.toml
gen/beep.c: ladderpack.toml
gen/beep.h: ladderpack.toml
gen/beep.json: ladderpack.toml
gen/beep.pio: ladderpack.toml
gen/beep.py: ladderpack.toml
gen/ladderpack_lossless.h: ladderpack.toml
gen/saw_table.c: ladderpack.toml
gen/saw_table.h: ladderpack.toml
gen/saw_table.py: ladderpack.toml
gen/fix.c: ladderpack.toml ladder_levels.json
gen/fix.h: ladderpack.toml ladder_levels.json
gen/fix.py: ladderpack.toml ladder_levels.json
gen/assets.c: ladder_levels.json ladderpack.toml
gen/assets.h: ladder_levels.json ladderpack.toml
gen/assets.py: ladder_levels.json ladderpack.toml

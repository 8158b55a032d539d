# gnuplot script written by stillpoint fit; run from this directory: gnuplot xc_model.gp
set datafile separator ','
set key top right autotitle columnhead
set grid
set terminal pngcairo size 900,600 noenhanced font 'sans,11'
set output 'xc_model.png.part'
set title 'Fitted exchange-correlation model'
set xlabel 'r_s (bohr)'
set ylabel 'energy per particle (hartree)'
plot '../xc_model.csv' every ::0::199 using 4:5 with lines lw 2 dt 2 title "model:xalpha Ne initial", '' every ::0::199 using 4:6 with lines lw 2 title "model:xalpha Ne fitted", '../xc_model.csv' every ::200::399 using 4:5 with lines lw 2 dt 2 title "model:xalpha Be initial", '' every ::200::399 using 4:6 with lines lw 2 title "model:xalpha Be fitted", '../xc_model.csv' every ::400::599 using 4:5 with lines lw 2 dt 2 title "model:xalpha He initial", '' every ::400::599 using 4:6 with lines lw 2 title "model:xalpha He fitted", '../xc_model.csv' every ::600::799 using 4:5 with lines lw 2 dt 2 title "model:xalpha H initial", '' every ::600::799 using 4:6 with lines lw 2 title "model:xalpha H fitted"
set terminal svg size 900,600 noenhanced font 'sans,11'
set output 'xc_model.svg.part'
replot
unset output

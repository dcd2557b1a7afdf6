# SPDX-License-Identifier: ISC
# bash completion for coefctl: commands, options, model names (asked of the
# daemon with `coefctl list --names`, using the same -s as the command line)
# and file names where a command takes a file.

_coefctl_models()
{
	local sock=$1
	if [[ -n $sock ]]; then
		coefctl -s "$sock" --timeout 2 list --names 2>/dev/null
	else
		coefctl --timeout 2 list --names 2>/dev/null
	fi
}

_coefctl()
{
	local cur prev words cword
	if declare -F _init_completion >/dev/null; then
		_init_completion -n = || return
	else
		cur=${COMP_WORDS[COMP_CWORD]}
		prev=${COMP_WORDS[COMP_CWORD - 1]}
		words=("${COMP_WORDS[@]}")
		cword=$COMP_CWORD
	fi

	local commands="list show predict watch pin freeze thaw reset history
	    plot feed stats check save reload fit"
	local common="--socket --token-file --json --timeout --help"
	local i cmd="" cmdi=0 sock=""

	# Find the command word and any -s given so far.
	for ((i = 1; i < cword; i++)); do
		case ${words[i]} in
		-s | --socket)
			sock=${words[i + 1]}
			((i++))
			;;
		--socket=*)
			sock=${words[i]#--socket=}
			;;
		--token-file | --timeout)
			((i++))
			;;
		-*) ;;
		*)
			if [[ -z $cmd ]]; then
				cmd=${words[i]}
				cmdi=$i
			fi
			;;
		esac
	done

	case $prev in
	-s | --socket | --token-file | --svg | --trace)
		COMPREPLY=($(compgen -f -- "$cur"))
		return
		;;
	--timeout | -n | --count | --every | --width | --height | --lambda | \
	    --tau | --delta | --gate | --name | --terms | --weight | --target | \
	    --time)
		# A value of our own: nothing to offer.
		return
		;;
	esac

	if [[ -z $cmd ]]; then
		if [[ $cur == -* ]]; then
			COMPREPLY=($(compgen -W "$common --version" -- "$cur"))
		else
			COMPREPLY=($(compgen -W "$commands" -- "$cur"))
		fi
		return
	fi

	local opts="" names=0 files=0
	case $cmd in
	list) opts="--names" ;;
	show | pin | freeze | thaw) names=1 ;;
	predict) names=1 ;;
	watch) opts="--every"; names=1 ;;
	reset) opts="--yes"; names=1 ;;
	history) opts="--count --csv"; names=1 ;;
	plot) opts="--count --svg --width --height --ascii"; names=1 ;;
	feed) opts="--time --quiet"; names=1; files=1 ;;
	check) names=1 ;;
	stats | save | reload) ;;
	fit)
		opts="--lambda --tau --time --weight --target --no-intercept
		    --terms --delta --gate --name --trace"
		files=1
		;;
	esac

	if [[ $cur == -* ]]; then
		COMPREPLY=($(compgen -W "$opts $common" -- "$cur"))
		return
	fi

	# Operands after the command (options and their values skipped).
	local nops=0
	for ((i = cmdi + 1; i < cword; i++)); do
		case ${words[i]} in
		-s | --socket | --token-file | --timeout | -n | --count | \
		    --every | --svg | --width | --height | --time)
			((i++))
			;;
		-*) ;;
		*) ((nops++)) ;;
		esac
	done
	if [[ $cmd == fit ]]; then
		COMPREPLY=($(compgen -f -- "$cur"))
		return
	fi
	if ((names)) && { ((nops == 0)) || [[ $cmd == check ]]; }; then
		COMPREPLY=($(compgen -W "$(_coefctl_models "$sock")" -- "$cur"))
		return
	fi
	if ((files)) && ((nops == 1)); then
		COMPREPLY=($(compgen -f -- "$cur"))
	fi
}

complete -F _coefctl coefctl

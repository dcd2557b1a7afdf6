# SPDX-License-Identifier: ISC
# bash completion for coefd(8): options, file names after -c and -s.
_coefd()
{
	local cur prev
	cur=${COMP_WORDS[COMP_CWORD]}
	prev=${COMP_WORDS[COMP_CWORD-1]}
	case $prev in
	-c|--config|-s|--socket)
		COMPREPLY=($(compgen -f -- "$cur"))
		return
		;;
	esac
	COMPREPLY=($(compgen -W '-c -n -s -v -V -h --config --check
	    --socket --verbose --version --help' -- "$cur"))
}
complete -F _coefd coefd

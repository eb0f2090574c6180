package sim

import (
	"fmt"
	"strconv"
	"strings"
)

// checkTree checks that the joints form one tree over the links.
func (p *urdfParser) checkTree() {
	u := p.u
	links := make(map[string]int, len(u.Links))
	for i, l := range u.Links {
		if k, dup := links[l.Name]; dup {
			p.errAt(xmlPos{line: l.Line, col: l.Col}, "link["+l.Name+"]", "link %q is defined twice (first at line %d)", l.Name, u.Links[k].Line)
			continue
		}
		links[l.Name] = i
	}
	if len(u.Links) == 0 {
		p.errs = append(p.errs, &FileError{File: p.file, Line: 1, Msg: "the robot has no <link>"})
		return
	}
	jointNames := make(map[string]int, len(u.Joints))
	parentOf := make(map[string]int, len(u.Joints)) // child link → joint index
	for i, j := range u.Joints {
		at := xmlPos{line: j.Line, col: j.Col}
		field := "joint[" + j.Name + "]"
		if k, dup := jointNames[j.Name]; dup {
			p.errAt(at, field, "joint %q is defined twice (first at line %d)", j.Name, u.Joints[k].Line)
		} else {
			jointNames[j.Name] = i
		}
		if _, ok := links[j.Parent]; !ok {
			p.errAt(j.parentAt, field+"/parent@link", "no link named %q in this file", j.Parent)
		}
		if _, ok := links[j.Child]; !ok {
			p.errAt(j.childAt, field+"/child@link", "no link named %q in this file", j.Child)
		}
		if j.Parent == j.Child {
			p.errAt(j.childAt, field+"/child@link", "link %q is its own parent: the joints form a loop", j.Child)
			continue
		}
		if k, dup := parentOf[j.Child]; dup {
			p.errAt(j.childAt, field+"/child@link", "link %q already has parent joint %q (line %d): a link has at most one parent, URDF describes a tree", j.Child, u.Joints[k].Name, u.Joints[k].Line)
			continue
		}
		parentOf[j.Child] = i
	}
	if len(p.errs) > 0 {
		return
	}
	var roots []URDFLink
	for _, l := range u.Links {
		if _, has := parentOf[l.Name]; !has {
			roots = append(roots, l)
		}
	}
	if len(roots) > 1 {
		names := make([]string, len(roots))
		for i, r := range roots {
			names[i] = fmt.Sprintf("%q (line %d)", r.Name, r.Line)
		}
		r := roots[1]
		p.errAt(xmlPos{line: r.Line, col: r.Col}, "link["+r.Name+"]", "the robot has %d root links (%s); every link but one must be the child of a joint", len(roots), strings.Join(names, ", "))
		return
	}
	// With at most one parent per link, a link whose parents never reach a
	// link without parent lies on a loop. Report the loop at the joint that
	// closes it in reading order (the one furthest down the file).
	for _, j := range u.Joints {
		link, steps := j.Child, 0
		for {
			k, has := parentOf[link]
			if !has {
				break
			}
			link = u.Joints[k].Parent
			if steps++; steps <= len(u.Joints) {
				continue
			}
			// link is on the loop now: go round it once.
			last, names := k, []string{}
			for l := link; ; {
				m := parentOf[l]
				names = append(names, strconv.Quote(l))
				if u.Joints[m].Line > u.Joints[last].Line {
					last = m
				}
				if l = u.Joints[m].Parent; l == link {
					break
				}
			}
			c := u.Joints[last]
			p.errAt(c.childAt, "joint["+c.Name+"]/child@link", "the joints form a loop through links %s: URDF describes a tree", strings.Join(names, ", "))
			return
		}
	}
}

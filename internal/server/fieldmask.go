package server

import (
	"strings"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/types/known/fieldmaskpb"
)

// applyMask copies into dst the fields of src named by the mask's paths
// (google.protobuf.FieldMask semantics as site.proto and target.proto state
// them: a message path replaces the whole message, a repeated field is
// replaced whole, a field unset in src is cleared in dst, naming one member
// of a oneof clears the others). An empty mask copies every field except
// outputOnly ones. Bad paths are recorded as violations of
// "update_mask.paths[i]"; dst is changed only when every path is good.
func applyMask(v *violations, dst, src proto.Message, mask *fieldmaskpb.FieldMask, outputOnly map[string]bool) {
	paths := mask.GetPaths()
	if len(paths) == 0 {
		keep := proto.Clone(dst)
		proto.Reset(dst)
		proto.Merge(dst, src)
		// Output-only fields keep their stored values.
		kr, dr := keep.ProtoReflect(), dst.ProtoReflect()
		fields := dr.Descriptor().Fields()
		for name := range outputOnly {
			fd := fields.ByName(protoreflect.Name(name))
			if fd == nil {
				continue
			}
			if kr.Has(fd) {
				dr.Set(fd, kr.Get(fd))
			} else {
				dr.Clear(fd)
			}
		}
		return
	}
	if len(paths) > MaxUpdateMaskPaths {
		v.add("update_mask.paths", "at most %d paths, got %d", MaxUpdateMaskPaths, len(paths))
		return
	}
	type step struct {
		fds []protoreflect.FieldDescriptor
	}
	steps := make([]step, 0, len(paths))
	n := len(v.list)
	for i, p := range paths {
		pp := idx("update_mask.paths", i)
		segs := strings.Split(p, ".")
		if outputOnly[segs[0]] {
			v.add(pp, "%q is output only", p)
			continue
		}
		md := dst.ProtoReflect().Descriptor()
		var fds []protoreflect.FieldDescriptor
		ok := true
		for j, seg := range segs {
			fd := md.Fields().ByName(protoreflect.Name(seg))
			if fd == nil {
				v.add(pp, "%q names no field of %s", p, md.FullName())
				ok = false
				break
			}
			fds = append(fds, fd)
			if j < len(segs)-1 {
				if fd.Kind() != protoreflect.MessageKind || fd.IsList() || fd.IsMap() {
					v.add(pp, "%q: %s is not a message, so it has no sub-fields", p, seg)
					ok = false
					break
				}
				md = fd.Message()
			}
		}
		if ok {
			steps = append(steps, step{fds})
		}
	}
	if len(v.list) > n {
		return
	}
	for _, st := range steps {
		d, s := dst.ProtoReflect(), src.ProtoReflect()
		srcOK := true
		for _, fd := range st.fds[:len(st.fds)-1] {
			d = d.Mutable(fd).Message()
			if srcOK && s.Has(fd) {
				s = s.Get(fd).Message()
			} else {
				srcOK = false
			}
		}
		last := st.fds[len(st.fds)-1]
		if srcOK && s.Has(last) {
			val := s.Get(last)
			switch {
			case last.IsList():
				l := d.NewField(last).List()
				sl := val.List()
				for k := 0; k < sl.Len(); k++ {
					e := sl.Get(k)
					if last.Kind() == protoreflect.MessageKind {
						e = protoreflect.ValueOfMessage(proto.Clone(e.Message().Interface()).ProtoReflect())
					}
					l.Append(e)
				}
				d.Set(last, protoreflect.ValueOfList(l))
			case last.Kind() == protoreflect.MessageKind:
				d.Set(last, protoreflect.ValueOfMessage(proto.Clone(val.Message().Interface()).ProtoReflect()))
			default:
				d.Set(last, val)
			}
		} else {
			d.Clear(last)
		}
	}
}

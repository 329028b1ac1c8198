package server

import (
	"fmt"
	"math"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
)

// nonFinite returns the path of the first NaN or infinite floating-point
// field of m (recursively), or "" when every one is finite. The validators
// already refuse such input; this is the last check before bytes reach the
// store, so that no NaN is ever stored whatever a bug upstream does.
func nonFinite(m proto.Message) string {
	return walkFinite(m.ProtoReflect(), string(m.ProtoReflect().Descriptor().Name()))
}

func walkFinite(m protoreflect.Message, path string) string {
	bad := ""
	m.Range(func(fd protoreflect.FieldDescriptor, v protoreflect.Value) bool {
		p := path + "." + string(fd.Name())
		check := func(v protoreflect.Value, p string) string {
			switch fd.Kind() {
			case protoreflect.DoubleKind, protoreflect.FloatKind:
				if x := v.Float(); math.IsNaN(x) || math.IsInf(x, 0) {
					return p
				}
			case protoreflect.MessageKind, protoreflect.GroupKind:
				return walkFinite(v.Message(), p)
			}
			return ""
		}
		switch {
		case fd.IsList():
			l := v.List()
			for i := 0; i < l.Len() && bad == ""; i++ {
				bad = check(l.Get(i), fmt.Sprintf("%s[%d]", p, i))
			}
		case fd.IsMap():
			v.Map().Range(func(k protoreflect.MapKey, mv protoreflect.Value) bool {
				if fd.MapValue().Kind() == protoreflect.MessageKind {
					bad = walkFinite(mv.Message(), p+"["+k.String()+"]")
				} else if fd.MapValue().Kind() == protoreflect.DoubleKind || fd.MapValue().Kind() == protoreflect.FloatKind {
					if x := mv.Float(); math.IsNaN(x) || math.IsInf(x, 0) {
						bad = p + "[" + k.String() + "]"
					}
				}
				return bad == ""
			})
		default:
			bad = check(v, p)
		}
		return bad == ""
	})
	return bad
}

// storable encodes a message for the store, refusing a non-finite value.
func storable(m proto.Message) ([]byte, error) {
	if p := nonFinite(m); p != "" {
		return nil, status.Errorf(codes.Internal, "internal error: non-finite value at %s not stored", p)
	}
	return marshal(m)
}

package nightloomv1

import (
	_ "embed"
	"fmt"
	"sync"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protodesc"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/reflect/protoregistry"
	"google.golang.org/protobuf/types/descriptorpb"
)

// descriptorSet is the API's FileDescriptorSet with source info (comments),
// written by scripts/genproto.sh (`buf build --exclude-imports`) and checked
// fresh by scripts/check-proto.sh. The generated *.pb.go files carry their
// descriptors without comments; these are the same descriptors with them.
//
//go:embed descriptors.binpb
var descriptorSet []byte

var (
	sourceOnce  sync.Once
	sourceFiles *protoregistry.Files
	sourceErr   error
)

// SourceFiles returns the API's file descriptors with their comments (for
// server reflection and generated documentation). Imports (the well-known
// types) resolve through protoregistry.GlobalFiles.
func SourceFiles() (*protoregistry.Files, error) {
	sourceOnce.Do(func() {
		var set descriptorpb.FileDescriptorSet
		if err := proto.Unmarshal(descriptorSet, &set); err != nil {
			sourceErr = fmt.Errorf("nightloomv1: descriptors.binpb: %w", err)
			return
		}
		files := new(protoregistry.Files)
		r := fallbackResolver{files}
		for _, fdp := range set.GetFile() {
			fd, err := protodesc.NewFile(fdp, r)
			if err != nil {
				sourceErr = fmt.Errorf("nightloomv1: descriptors.binpb: %s: %w", fdp.GetName(), err)
				return
			}
			if err := files.RegisterFile(fd); err != nil {
				sourceErr = fmt.Errorf("nightloomv1: descriptors.binpb: %w", err)
				return
			}
		}
		sourceFiles = files
	})
	return sourceFiles, sourceErr
}

// fallbackResolver finds descriptors in the API's own files first, then in
// the global registry (the well-known types).
type fallbackResolver struct{ own *protoregistry.Files }

func (r fallbackResolver) FindFileByPath(path string) (protoreflect.FileDescriptor, error) {
	if fd, err := r.own.FindFileByPath(path); err == nil {
		return fd, nil
	}
	return protoregistry.GlobalFiles.FindFileByPath(path)
}

func (r fallbackResolver) FindDescriptorByName(name protoreflect.FullName) (protoreflect.Descriptor, error) {
	if d, err := r.own.FindDescriptorByName(name); err == nil {
		return d, nil
	}
	return protoregistry.GlobalFiles.FindDescriptorByName(name)
}

// SourceResolver is SourceFiles with the global registry behind it, as
// server reflection wants a protodesc.Resolver.
func SourceResolver() (protodesc.Resolver, error) {
	files, err := SourceFiles()
	if err != nil {
		return nil, err
	}
	return fallbackResolver{files}, nil
}

"""Request and response bodies of the accounts API."""

from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

Role = Literal["admin", "reviewer", "technician", "viewer"]


class LoginRequest(BaseModel):
    model_config = ConfigDict(extra="forbid")
    username: str = Field(min_length=1, max_length=64)
    password: str = Field(min_length=1, max_length=1024)


class UserRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    id: int
    username: str
    display_name: str
    role: Role
    is_active: bool
    created_at: datetime
    version: int


class SessionRead(BaseModel):
    user: UserRead
    csrf_token: str


class UserCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    username: str = Field(min_length=2, max_length=64)
    display_name: str = Field(default="", max_length=200)
    role: Role
    password: str = Field(min_length=8, max_length=256)


class UserUpdate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    display_name: str | None = Field(default=None, max_length=200)
    role: Role | None = None
    is_active: bool | None = None


class TokenCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")
    name: str = Field(min_length=1, max_length=100)


class TokenRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)
    id: int
    name: str
    prefix: str
    created_at: datetime
    revoked_at: datetime | None


class TokenCreated(TokenRead):
    token: str = Field(description="The secret token, shown once; send it as 'Authorization: Bearer <token>'.")
